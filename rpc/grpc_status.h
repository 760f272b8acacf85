// One mapping of plumb::Status codes onto gRPC status codes, for every service of both
// daemons. Thread-safe (pure functions).
//
//   Ok                  -> OK
//   NotFound            -> NOT_FOUND
//   InvalidArgument     -> INVALID_ARGUMENT
//   FailedPrecondition  -> FAILED_PRECONDITION
//   ResourceExhausted   -> RESOURCE_EXHAUSTED (a full queue, quota or disk: retry later)
//   Unavailable         -> UNAVAILABLE
//   IoError             -> UNAVAILABLE (the disk or database refused: retry later)
//   Aborted             -> ABORTED
//   Corruption          -> INTERNAL (stored data is damaged: not the caller's to fix)
//
// A service whose Status code means something narrower says so before calling these (the
// ranker: the Scorer's Aborted is a passed deadline, DEADLINE_EXCEEDED).
#pragma once

#include <grpcpp/support/status.h>

#include <string_view>

#include "core/status.h"

namespace plumb::rpc {

grpc::StatusCode ToGrpcCode(Status::Code code);

// The gRPC status for `status`, with its message unchanged.
grpc::Status ToGrpcStatus(const Status& status);

// The same with the message "<what>: <status message>".
grpc::Status ToGrpcStatus(const Status& status, std::string_view what);

}  // namespace plumb::rpc
