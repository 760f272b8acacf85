#include "rpc/grpc_status.h"

#include <string>

namespace plumb::rpc {

grpc::StatusCode ToGrpcCode(Status::Code code) {
  switch (code) {
    case Status::Code::kOk:
      return grpc::StatusCode::OK;
    case Status::Code::kNotFound:
      return grpc::StatusCode::NOT_FOUND;
    case Status::Code::kInvalidArgument:
      return grpc::StatusCode::INVALID_ARGUMENT;
    case Status::Code::kFailedPrecondition:
      return grpc::StatusCode::FAILED_PRECONDITION;
    case Status::Code::kResourceExhausted:
      return grpc::StatusCode::RESOURCE_EXHAUSTED;
    case Status::Code::kUnavailable:
    case Status::Code::kIoError:
      return grpc::StatusCode::UNAVAILABLE;
    case Status::Code::kAborted:
      return grpc::StatusCode::ABORTED;
    case Status::Code::kCorruption:
      return grpc::StatusCode::INTERNAL;
  }
  return grpc::StatusCode::INTERNAL;
}

grpc::Status ToGrpcStatus(const Status& status) {
  if (status.ok()) return grpc::Status::OK;
  return grpc::Status(ToGrpcCode(status.code()), status.message());
}

grpc::Status ToGrpcStatus(const Status& status, std::string_view what) {
  if (status.ok()) return grpc::Status::OK;
  return grpc::Status(ToGrpcCode(status.code()), std::string(what) + ": " + status.message());
}

}  // namespace plumb::rpc
