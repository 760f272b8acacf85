#include "trainer/online/train_server.h"

#include <grpc/grpc.h>
#include <grpcpp/ext/proto_server_reflection_plugin.h>
#include <grpcpp/health_check_service_interface.h>
#include <spdlog/spdlog.h>

#include <thread>

#include "rpc/listen_address.h"
#include "rpc/listen_probe.h"
#include "rpc/server_credentials.h"

namespace plumb::online {
namespace {

// A Prepare error with what it was about in front; the errors there are InvalidArgument or
// IoError (a file that cannot be read), and keep their code.
Status Explained(const std::string& what, const Status& s) {
  const std::string message = what + ": " + s.message();
  return s.code() == Status::Code::kIoError ? Status::IoError(message)
                                            : Status::InvalidArgument(message);
}

}  // namespace

Status TrainServer::Prepare(const TrainEndpointOptions& options,
                            std::unique_ptr<TrainServer>* out) {
  std::unique_ptr<TrainServer> server(new TrainServer());
  server->options_ = options;
  if (!options.token_file.empty()) {
    std::string warning;
    if (Status s = rpc::BearerAuth::FromFile(options.token_file, &server->auth_, &warning);
        !s.ok()) {
      return Explained("cannot load the bearer token", s);
    }
    if (!warning.empty()) spdlog::warn("{}", warning);
  }
  const bool loopback = rpc::IsLoopbackAddress(options.listen);
  if (server->auth_ == nullptr && !loopback) {
    if (!options.allow_insecure_remote) {
      return Status::InvalidArgument(
          "refusing to serve " + options.listen +
          " without a bearer token: anyone who can reach it could write events and change the "
          "active model. Set token_file, listen on a loopback address (127.0.0.1), or pass "
          "--allow-insecure-remote if the network is trusted.");
    }
    spdlog::warn("serving {} without a token (--allow-insecure-remote)", options.listen);
  }
  server->tls_ = !options.tls_cert_file.empty();
  if (server->auth_ != nullptr && !server->tls_ && !loopback) {
    spdlog::warn("the bearer token travels in clear text to {}: configure tls_cert/tls_key",
                 options.listen);
  }
  if (Status s = rpc::MakeServerCredentials({options.tls_cert_file, options.tls_key_file, ""},
                                            &server->credentials_);
      !s.ok()) {
    return Explained("cannot set up TLS", s);
  }
  *out = std::move(server);
  return Status::Ok();
}

TrainServer::~TrainServer() { Shutdown(std::chrono::milliseconds(0)); }

Status TrainServer::Start(GroupCommitter* committer, TrainMetrics* metrics,
                          const IngestLimits& limits, store::Store* store, OnlineLoop* loop) {
  const CallAdmission admission{auth_.get(), &inflight_};
  ingest_ = std::make_unique<IngestService>(committer, metrics, admission, limits);
  control_ = std::make_unique<ControlService>(store, loop, admission, metrics);

  // Both are process-wide switches that take effect for servers built afterwards.
  grpc::EnableDefaultHealthCheckService(true);
  grpc::reflection::InitProtoReflectionServerBuilderPlugin();
  grpc::ServerBuilder builder;
  // gRPC sets SO_REUSEPORT on its listeners by default: a second trainer on the same port
  // would then start and take a share of the calls, against another store. One port, one
  // process.
  builder.AddChannelArgument(GRPC_ARG_ALLOW_REUSEPORT, 0);
  builder.AddListeningPort(options_.listen, credentials_, &port_);
  builder.RegisterService(ingest_.get());
  builder.RegisterService(control_.get());
  builder.SetMaxReceiveMessageSize(options_.max_receive_message_bytes);
  server_ = builder.BuildAndStart();
  if (server_ == nullptr || port_ == 0) {
    server_.reset();
    const Status why = rpc::ProbeListenAddress(options_.listen, "gRPC");
    return why.ok() ? Status::IoError("cannot bind it (bad TLS files or address?)") : why;
  }
  return Status::Ok();
}

void TrainServer::Shutdown(std::chrono::milliseconds grace) {
  if (shut_down_ || server_ == nullptr) return;
  shut_down_ = true;
  server_->GetHealthCheckService()->SetServingStatus(false);
  const auto deadline = std::chrono::steady_clock::now() + grace;
  std::thread stopper([&] { server_->Shutdown(std::chrono::system_clock::now() + grace); });
  // Shutdown() returns only once every client connection is gone; idle clients keep theirs
  // until the deadline. So as soon as no handler of ours runs (and new ones are refused),
  // close the connections, as Shutdown() itself would at the deadline.
  if (!inflight_.CloseAndWait(deadline)) {
    spdlog::warn("{} calls still running after the grace period; cancelling them",
                 inflight_.running());
  }
  grpc_server_cancel_all_calls(server_->c_server());
  stopper.join();
  server_->Wait();
}

}  // namespace plumb::online
