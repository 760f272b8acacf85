// Decoding request messages in plumb's own code instead of inside gRPC, so that a message
// that cannot be decoded is told apart from the end of a stream and answered with
// INVALID_ARGUMENT naming the field, instead of gRPC's INTERNAL with an empty message (unary
// calls) or a silent end of the read loop (client streams). See checked_methods.h for how
// the services use it.
#pragma once

#include <google/protobuf/descriptor.h>
#include <google/protobuf/message.h>
#include <grpcpp/support/byte_buffer.h>

#include <string>
#include <string_view>

#include "core/status.h"

namespace plumb::rpc {

// True when `bytes` is well-formed UTF-8 (RFC 3629: no overlong forms, no surrogates
// U+D800..U+DFFF, nothing above U+10FFFF) — what protobuf requires of proto3 string fields.
bool IsValidUtf8(std::string_view bytes);

// Why `bytes` do not decode as a message of type `type`, as a phrase that names the field by
// its path, e.g. "events[3].user_id is not valid UTF-8" or "the message is truncated or not
// a protobuf encoding (at byte 17)". Returns "" when it finds nothing wrong. Thread-safe.
std::string ExplainUndecodable(const google::protobuf::Descriptor& type, std::string_view bytes);

// Decodes `buffer` into `message` (cleared first). On failure: InvalidArgument with
// "<full type name>: <ExplainUndecodable phrase>". Leaves `buffer` readable again.
Status DecodeMessage(const grpc::ByteBuffer& buffer, google::protobuf::Message* message);

}  // namespace plumb::rpc
