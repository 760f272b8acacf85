#include "trainer/online/call_admission.h"

namespace plumb::online {

grpc::Status Admit(const CallAdmission& admission, const grpc::ServerContext& context,
                   InflightCalls::Scope* scope) {
  *scope = EnterCall(admission.inflight);
  if (!scope->admitted()) {
    return grpc::Status(grpc::StatusCode::UNAVAILABLE,
                        "plumb-train is shutting down; nothing of this call was stored");
  }
  return admission.auth == nullptr ? grpc::Status::OK : admission.auth->Check(context);
}

}  // namespace plumb::online
