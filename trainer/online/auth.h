// Who may call plumb-train's gRPC endpoint: an optional bearer token (every call then
// carries `authorization: Bearer <token>` metadata), optional TLS, and the rule that an
// endpoint without a token listens only on loopback unless the operator says otherwise.
#pragma once

#include <grpcpp/security/server_credentials.h>
#include <grpcpp/server_context.h>
#include <grpcpp/support/status.h>

#include <memory>
#include <string>
#include <string_view>

#include "core/status.h"
#include "rpc/bearer_auth.h"
#include "rpc/listen_address.h"
#include "trainer/online/inflight_calls.h"

namespace plumb::online {

// The token check and the loopback rule live in rpc/, shared with plumb-serve.
using rpc::BearerAuth;
using rpc::IsLoopbackAddress;

// What every handler checks first: is plumb-train still taking calls, and does the
// caller carry the token. Both pointers may be null (no token; calls not tracked) and must
// otherwise outlive the services.
struct CallAdmission {
  const BearerAuth* auth = nullptr;
  InflightCalls* inflight = nullptr;
};

// OK with `scope` holding the call's place among the running ones; otherwise the status
// the handler returns at once: UNAVAILABLE while shutting down, UNAUTHENTICATED without
// the right token.
grpc::Status Admit(const CallAdmission& admission, const grpc::ServerContext& context,
                   InflightCalls::Scope* scope);

// Insecure credentials when both paths are empty; TLS from PEM files otherwise.
// InvalidArgument when only one path is given, IoError when a file cannot be read.
Status MakeServerCredentials(const std::string& tls_cert_path, const std::string& tls_key_path,
                             std::shared_ptr<grpc::ServerCredentials>* out);

}  // namespace plumb::online
