// TransportRejections: counts the calls gRPC itself refuses before any handler of ours
// runs. The synchronous server answers RESOURCE_EXHAUSTED ("Server Threadpool Exhausted")
// when a call arrives and its thread limit is reached; without this, such calls appear in
// no metric at all. A server interceptor sees the status of every call as it is sent and
// reports the refused ones to `on_rejection` with the full method name
// ("/plumb.v1.Ranker/Recommend").
#pragma once

#include <grpcpp/support/server_interceptor.h>

#include <functional>
#include <memory>
#include <string_view>
#include <vector>

namespace plumb::server {

using RejectionCallback = std::function<void(std::string_view method)>;

// Interceptor creators for ServerBuilder::experimental().SetInterceptorCreators(). The
// callback is called from gRPC's threads, concurrently; it must be thread-safe and outlive
// the server.
std::vector<std::unique_ptr<grpc::experimental::ServerInterceptorFactoryInterface>>
TransportRejectionInterceptors(RejectionCallback on_rejection);

// True for the status gRPC's synchronous server sends when it has no thread for a call
// (its message is the constant kServerThreadpoolExhausted of gRPC's server_cc.cc).
bool IsThreadPoolRejection(const grpc::Status& status);

}  // namespace plumb::server
