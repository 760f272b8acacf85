// How plumb's tools reach a running process: a gRPC channel to HOST:PORT (plain or TLS),
// the optional bearer token plumb-train asks for, and the names of gRPC status codes.
#pragma once

#include <grpcpp/channel.h>
#include <grpcpp/client_context.h>
#include <grpcpp/support/status.h>

#include <memory>
#include <string>
#include <string_view>

#include "core/status.h"

namespace plumb::tools {

// Where and how to connect.
struct ChannelSpec {
  std::string target;           // HOST:PORT, or any gRPC target URI (unix:PATH, dns:///...)
  std::string tls_ca_file;      // PEM roots to trust; empty = plain text (no TLS)
  std::string tls_server_name;  // TLS: name to expect in the certificate instead of HOST
};

// Creates a channel for `spec`. Creating a channel does not connect; the first call does.
// InvalidArgument for an empty target, IoError when the CA file cannot be read.
Status MakeChannel(const ChannelSpec& spec, std::shared_ptr<grpc::Channel>* out);

// Reads a bearer token from `path`: the file's content with surrounding whitespace
// trimmed, the same rule plumb-train applies to its own copy. InvalidArgument for an empty
// token or one with spaces or control characters inside; IoError when unreadable.
Status ReadBearerToken(const std::string& path, std::string* token);

// Adds `authorization: Bearer <token>` to the call's metadata; does nothing for an empty
// token. Call before the RPC starts.
void AttachBearerToken(const std::string& token, grpc::ClientContext* context);

// "OK", "NOT_FOUND", ... as the gRPC status codes are spelled in the protocol's
// documentation (doc/statuscodes.md); "CODE_<n>" for a number outside the known set.
std::string StatusCodeName(grpc::StatusCode code);

// "NOT_FOUND: <message>" (the message left out when empty).
std::string DescribeStatus(const grpc::Status& status);

}  // namespace plumb::tools
