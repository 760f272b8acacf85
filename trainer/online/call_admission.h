// CallAdmission: what every handler of plumb-train's gRPC services checks first. Is
// plumb-train still taking calls (InflightCalls, closed at shutdown), and does the caller carry
// the bearer token (rpc/bearer_auth.h, shared with plumb-serve)?
#pragma once

#include <grpcpp/server_context.h>
#include <grpcpp/support/status.h>

#include "rpc/bearer_auth.h"
#include "trainer/online/inflight_calls.h"

namespace plumb::online {

// Both pointers may be null (no token; calls not tracked) and must otherwise outlive the
// services.
struct CallAdmission {
  const rpc::BearerAuth* auth = nullptr;
  InflightCalls* inflight = nullptr;
};

// OK with `scope` holding the call's place among the running ones; otherwise the status
// the handler returns at once: UNAVAILABLE while shutting down, UNAUTHENTICATED without
// the right token.
grpc::Status Admit(const CallAdmission& admission, const grpc::ServerContext& context,
                   InflightCalls::Scope* scope);

}  // namespace plumb::online
