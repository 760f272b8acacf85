// rpc/grpc_status.h: the one Status -> gRPC code mapping, row by row as its header states,
// and the message forms.
#include "rpc/grpc_status.h"

#include <gtest/gtest.h>

namespace plumb::rpc {
namespace {

TEST(GrpcStatus, EveryCodeMapsAsTheHeaderStates) {
  using C = Status::Code;
  using G = grpc::StatusCode;
  EXPECT_EQ(ToGrpcCode(C::kOk), G::OK);
  EXPECT_EQ(ToGrpcCode(C::kNotFound), G::NOT_FOUND);
  EXPECT_EQ(ToGrpcCode(C::kInvalidArgument), G::INVALID_ARGUMENT);
  EXPECT_EQ(ToGrpcCode(C::kFailedPrecondition), G::FAILED_PRECONDITION);
  EXPECT_EQ(ToGrpcCode(C::kResourceExhausted), G::RESOURCE_EXHAUSTED);
  EXPECT_EQ(ToGrpcCode(C::kUnavailable), G::UNAVAILABLE);
  EXPECT_EQ(ToGrpcCode(C::kIoError), G::UNAVAILABLE);
  EXPECT_EQ(ToGrpcCode(C::kAborted), G::ABORTED);
  EXPECT_EQ(ToGrpcCode(C::kCorruption), G::INTERNAL);
}

TEST(GrpcStatus, MessagesAreKeptOrPrefixed) {
  EXPECT_TRUE(ToGrpcStatus(Status::Ok()).ok());
  EXPECT_TRUE(ToGrpcStatus(Status::Ok(), "cannot list versions").ok());
  const grpc::Status plain = ToGrpcStatus(Status::NotFound("no version 7"));
  EXPECT_EQ(plain.error_code(), grpc::StatusCode::NOT_FOUND);
  EXPECT_EQ(plain.error_message(), "no version 7");
  const grpc::Status prefixed =
      ToGrpcStatus(Status::Corruption("bad block"), "cannot activate version 7");
  EXPECT_EQ(prefixed.error_code(), grpc::StatusCode::INTERNAL);
  EXPECT_EQ(prefixed.error_message(), "cannot activate version 7: bad block");
}

}  // namespace
}  // namespace plumb::rpc
