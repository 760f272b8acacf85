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
#include "trainer/online/inflight_calls.h"

namespace plumb::online {

// Checks the bearer token of incoming calls. Immutable after construction; Check() may be
// called from any thread.
class BearerAuth {
 public:
  // `token`: printable ASCII without spaces, not empty.
  explicit BearerAuth(std::string token) : token_(std::move(token)) {}

  // Reads the token from a file: its content with surrounding whitespace trimmed.
  // InvalidArgument for an empty token or one with spaces or control characters inside,
  // IoError when the file cannot be read. When the file is readable by group or others,
  // `warning` (optional) receives a sentence saying so.
  static Status FromFile(const std::string& path, std::unique_ptr<BearerAuth>* out,
                         std::string* warning = nullptr);

  // OK when the call carries the right token; UNAUTHENTICATED with a message saying what
  // is missing or wrong otherwise. The comparison takes the same time wherever the tokens
  // differ.
  grpc::Status Check(const grpc::ServerContext& context) const;

 private:
  std::string token_;
};

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

// True for listen addresses only reachable from this machine: 127.0.0.0/8, ::1,
// "localhost", and unix-domain sockets ("unix:..."). False for wildcards (0.0.0.0, [::]),
// other addresses and other host names.
bool IsLoopbackAddress(std::string_view listen_address);

// Insecure credentials when both paths are empty; TLS from PEM files otherwise.
// InvalidArgument when only one path is given, IoError when a file cannot be read.
Status MakeServerCredentials(const std::string& tls_cert_path, const std::string& tls_key_path,
                             std::shared_ptr<grpc::ServerCredentials>* out);

}  // namespace plumb::online
