#include "server/transport_rejections.h"

#include <string>

namespace plumb::server {

namespace {

class RejectionInterceptor final : public grpc::experimental::Interceptor {
 public:
  RejectionInterceptor(const char* method, const RejectionCallback* on_rejection)
      : method_(method == nullptr ? "" : method), on_rejection_(on_rejection) {}

  void Intercept(grpc::experimental::InterceptorBatchMethods* methods) override {
    if (methods->QueryInterceptionHookPoint(
            grpc::experimental::InterceptionHookPoints::PRE_SEND_STATUS) &&
        IsThreadPoolRejection(methods->GetSendStatus())) {
      (*on_rejection_)(method_);
    }
    methods->Proceed();
  }

 private:
  std::string_view method_;  // gRPC keeps the method name for the server's lifetime
  const RejectionCallback* on_rejection_;
};

class RejectionInterceptorFactory final
    : public grpc::experimental::ServerInterceptorFactoryInterface {
 public:
  explicit RejectionInterceptorFactory(RejectionCallback on_rejection)
      : on_rejection_(std::move(on_rejection)) {}
  grpc::experimental::Interceptor* CreateServerInterceptor(
      grpc::experimental::ServerRpcInfo* info) override {
    return new RejectionInterceptor(info->method(), &on_rejection_);
  }

 private:
  const RejectionCallback on_rejection_;
};

}  // namespace

bool IsThreadPoolRejection(const grpc::Status& status) {
  return status.error_code() == grpc::StatusCode::RESOURCE_EXHAUSTED &&
         status.error_message() == "Server Threadpool Exhausted";
}

std::vector<std::unique_ptr<grpc::experimental::ServerInterceptorFactoryInterface>>
TransportRejectionInterceptors(RejectionCallback on_rejection) {
  std::vector<std::unique_ptr<grpc::experimental::ServerInterceptorFactoryInterface>> out;
  out.push_back(std::make_unique<RejectionInterceptorFactory>(std::move(on_rejection)));
  return out;
}

}  // namespace plumb::server
