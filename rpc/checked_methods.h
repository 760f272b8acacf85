// Method handlers that decode requests in plumb's code (message_decoding.h) rather than in
// gRPC's: a service re-registers its generated methods with them in its constructor
// (grpc::Service::MarkMethodStreamed, which gRPC's generated "streamed unary" services use).
// On the wire nothing changes for a client: same paths, same messages.
//
//  - CheckedUnary: a request that cannot be decoded (e.g. a string field with invalid UTF-8)
//    is answered INVALID_ARGUMENT "<type>: <field> is not valid UTF-8 ..." instead of gRPC's
//    INTERNAL with an empty message, and the service's observer hears of it (metrics).
//  - CheckedClientStream: the handler reads through a MessageReader, which tells the
//    client's half-close apart from a message that cannot be decoded; gRPC's ServerReader
//    answers false for both, so a read loop used to end as if the stream had finished.
//
// The handler classes are the ones gRPC's generated code instantiates
// (grpc/support/method_handler.h). Every observer and method runs on the calling gRPC
// thread; they must be thread-safe as the methods themselves are.
#pragma once

#include <grpcpp/grpcpp.h>
#include <grpcpp/support/method_handler.h>

#include <chrono>
#include <functional>
#include <string>

#include "rpc/message_decoding.h"

namespace plumb::rpc {

// Told once per call when it ends: its status, whether the request (or a stream message)
// could not be decoded, and the time the handler took.
using CallObserver =
    std::function<void(const grpc::Status& status, bool undecodable, double seconds)>;

// The canonical name of a gRPC status code, as gRPC's documentation spells it
// ("INVALID_ARGUMENT"); "UNKNOWN" for a value outside the enumeration.
const char* GrpcCodeName(grpc::StatusCode code);

// The index of `method` in the generated Service of `service` (full name, e.g.
// "plumb.v1.Ranker"): the order of the .proto, which is the order generated code registers.
// Aborts if either is unknown (a programming error, caught by any test that starts the
// service).
int MethodIndex(const std::string& service, const std::string& method);

// The next message of a client stream, decoded by plumb.
template <class Request>
class MessageReader {
 public:
  enum class Result { kMessage, kEnd, kUndecodable };

  explicit MessageReader(grpc::internal::ReaderInterface<grpc::ByteBuffer>* stream)
      : stream_(stream) {}

  // kMessage: `*message` holds the next message. kEnd: the client closed its side (or the
  // call was cancelled: check the context). kUndecodable: the next message could not be
  // decoded; error() says why. After kEnd or kUndecodable, do not read again.
  Result Read(Request* message) {
    grpc::ByteBuffer buffer;
    if (!stream_->Read(&buffer)) return Result::kEnd;
    error_ = DecodeMessage(buffer, message);
    if (!error_.ok()) {
      undecodable_ = true;
      return Result::kUndecodable;
    }
    return Result::kMessage;
  }

  const Status& error() const { return error_; }
  bool saw_undecodable() const { return undecodable_; }

 private:
  grpc::internal::ReaderInterface<grpc::ByteBuffer>* const stream_;
  Status error_;
  bool undecodable_ = false;
};

template <class Request, class Response>
using UnaryMethod = std::function<grpc::Status(grpc::ServerContext*, const Request*, Response*)>;

template <class Request, class Response>
using ClientStreamMethod =
    std::function<grpc::Status(grpc::ServerContext*, MessageReader<Request>*, Response*)>;

// A handler for a unary method (see above). Owned by the service once marked.
template <class Request, class Response>
grpc::internal::MethodHandler* CheckedUnary(UnaryMethod<Request, Response> method,
                                            CallObserver observer) {
  using Streamer = grpc::ServerUnaryStreamer<grpc::ByteBuffer, Response>;
  return new grpc::internal::StreamedUnaryHandler<grpc::ByteBuffer, Response>(
      [method = std::move(method), observer = std::move(observer)](
          grpc::ServerContext* context, Streamer* streamer) -> grpc::Status {
        const auto start = std::chrono::steady_clock::now();
        auto seconds = [&] {
          return std::chrono::duration<double>(std::chrono::steady_clock::now() - start).count();
        };
        grpc::ByteBuffer buffer;
        if (!streamer->Read(&buffer)) {
          grpc::Status status(grpc::StatusCode::CANCELLED, "the call ended before its request");
          if (observer) observer(status, false, seconds());
          return status;
        }
        Request request;
        if (Status decoded = DecodeMessage(buffer, &request); !decoded.ok()) {
          grpc::Status status(grpc::StatusCode::INVALID_ARGUMENT,
                              "the request cannot be decoded: " + decoded.message());
          if (observer) observer(status, true, seconds());
          return status;
        }
        Response response;
        grpc::Status status = method(context, &request, &response);
        if (status.ok()) streamer->Write(response);  // fails only if the client has gone
        if (observer) observer(status, false, seconds());
        return status;
      });
}

// A handler for a client-streaming method (see above). Owned by the service once marked.
template <class Request, class Response>
grpc::internal::MethodHandler* CheckedClientStream(ClientStreamMethod<Request, Response> method,
                                                   CallObserver observer) {
  using Stream = grpc::ServerReaderWriter<Response, grpc::ByteBuffer>;
  return new grpc::internal::TemplatedBidiStreamingHandler<Stream, false>(
      [method = std::move(method), observer = std::move(observer)](grpc::ServerContext* context,
                                                                   Stream* stream) -> grpc::Status {
        const auto start = std::chrono::steady_clock::now();
        MessageReader<Request> reader(stream);
        Response response;
        grpc::Status status = method(context, &reader, &response);
        if (status.ok()) stream->Write(response);
        if (observer) {
          observer(status, reader.saw_undecodable(),
                   std::chrono::duration<double>(std::chrono::steady_clock::now() - start).count());
        }
        return status;
      });
}

}  // namespace plumb::rpc
