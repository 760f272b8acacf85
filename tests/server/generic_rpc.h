// Calls to the standard gRPC services (health checking, reflection) without their
// generated code: messages are encoded and decoded field by field with protobuf's
// UnknownFieldSet, through gRPC's generic stub. That is how a generic tool sees plumb.
//
// Field numbers are those of grpc/health/v1/health.proto and
// grpc/reflection/v1alpha/reflection.proto (quoted from memory; the tests below fail if
// they are wrong, since the server side is gRPC's own implementation).
#pragma once

#include <google/protobuf/unknown_field_set.h>
#include <grpcpp/generic/generic_stub.h>
#include <grpcpp/grpcpp.h>

#include <chrono>
#include <future>
#include <string>
#include <vector>

namespace plumb::server::testing {

inline grpc::ByteBuffer ToBuffer(const std::string& bytes) {
  grpc::Slice slice(bytes);
  return grpc::ByteBuffer(&slice, 1);
}

inline std::string FromBuffer(const grpc::ByteBuffer& buffer) {
  std::vector<grpc::Slice> slices;
  (void)buffer.Dump(&slices);
  std::string out;
  for (const grpc::Slice& s : slices)
    out.append(reinterpret_cast<const char*>(s.begin()), s.size());
  return out;
}

inline grpc::Status GenericUnary(const std::shared_ptr<grpc::Channel>& channel,
                                 const std::string& method, const std::string& request,
                                 std::string* response) {
  grpc::GenericStub stub(channel);
  grpc::ClientContext context;
  context.set_deadline(std::chrono::system_clock::now() + std::chrono::seconds(10));
  grpc::ByteBuffer req = ToBuffer(request), resp;
  std::promise<grpc::Status> done;
  stub.UnaryCall(&context, method, grpc::StubOptions(), &req, &resp,
                 [&done](grpc::Status s) { done.set_value(std::move(s)); });
  grpc::Status status = done.get_future().get();
  if (status.ok()) *response = FromBuffer(resp);
  return status;
}

// One bidirectional-streaming exchange: writes every request, half-closes, reads until the
// server ends the stream.
inline grpc::Status GenericBidi(const std::shared_ptr<grpc::Channel>& channel,
                                const std::string& method, const std::vector<std::string>& requests,
                                std::vector<std::string>* responses) {
  grpc::GenericStub stub(channel);
  grpc::ClientContext context;
  context.set_deadline(std::chrono::system_clock::now() + std::chrono::seconds(10));
  grpc::CompletionQueue cq;
  auto call = stub.PrepareCall(&context, method, &cq);
  void* tag = nullptr;
  bool ok = false;
  auto step = [&](void* want) { return cq.Next(&tag, &ok) && tag == want && ok; };
  call->StartCall(reinterpret_cast<void*>(1));
  if (!step(reinterpret_cast<void*>(1))) return grpc::Status(grpc::StatusCode::UNKNOWN, "start");
  for (const std::string& r : requests) {
    grpc::ByteBuffer buf = ToBuffer(r);
    call->Write(buf, reinterpret_cast<void*>(2));
    if (!step(reinterpret_cast<void*>(2))) return grpc::Status(grpc::StatusCode::UNKNOWN, "write");
  }
  call->WritesDone(reinterpret_cast<void*>(3));
  if (!step(reinterpret_cast<void*>(3))) return grpc::Status(grpc::StatusCode::UNKNOWN, "close");
  while (true) {
    grpc::ByteBuffer buf;
    call->Read(&buf, reinterpret_cast<void*>(4));
    if (!step(reinterpret_cast<void*>(4))) break;
    responses->push_back(FromBuffer(buf));
  }
  grpc::Status status;
  call->Finish(&status, reinterpret_cast<void*>(5));
  cq.Next(&tag, &ok);
  cq.Shutdown();
  while (cq.Next(&tag, &ok)) {
  }
  return status;
}

// grpc.health.v1.Health/Check. Returns the ServingStatus number (1 SERVING, 2 NOT_SERVING)
// or -1 when the call failed (*status says why).
inline int HealthCheck(const std::shared_ptr<grpc::Channel>& channel, const std::string& service,
                       grpc::Status* status = nullptr) {
  google::protobuf::UnknownFieldSet request;
  request.AddLengthDelimited(1, service);  // HealthCheckRequest.service
  std::string bytes, response;
  request.SerializeToString(&bytes);
  grpc::Status s = GenericUnary(channel, "/grpc.health.v1.Health/Check", bytes, &response);
  if (status != nullptr) *status = s;
  if (!s.ok()) return -1;
  google::protobuf::UnknownFieldSet fields;
  if (!fields.ParseFromString(response)) return -1;
  for (int k = 0; k < fields.field_count(); ++k) {
    if (fields.field(k).number() == 1) return static_cast<int>(fields.field(k).varint());
  }
  return 0;  // proto3 omits the default, UNKNOWN
}

// The length-delimited contents of field `number` of an encoded message (all occurrences).
inline std::vector<std::string> BytesFields(const std::string& message, int number) {
  google::protobuf::UnknownFieldSet fields;
  std::vector<std::string> out;
  if (!fields.ParseFromString(message)) return out;
  for (int k = 0; k < fields.field_count(); ++k) {
    const auto& f = fields.field(k);
    if (f.number() == number && f.type() == google::protobuf::UnknownField::TYPE_LENGTH_DELIMITED)
      out.push_back(f.length_delimited());
  }
  return out;
}

}  // namespace plumb::server::testing
