// BearerAuth: the optional shared secret that callers of a plumb endpoint present as
// `authorization: Bearer <token>` metadata (RFC 6750). Both processes use it: plumb-train
// for EventIngest and ModelControl, plumb-serve for Ranker.
#pragma once

#include <grpcpp/server_context.h>
#include <grpcpp/support/status.h>

#include <memory>
#include <string>

#include "core/status.h"

namespace plumb::rpc {

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

}  // namespace plumb::rpc
