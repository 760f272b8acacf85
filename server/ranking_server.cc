#include "server/ranking_server.h"

#include <grpcpp/ext/proto_server_reflection_plugin.h>
#include <grpcpp/health_check_service_interface.h>

#include <algorithm>
#include <thread>

#include "rpc/listen_probe.h"
#include "rpc/server_credentials.h"
#include "server/transport_rejections.h"

namespace plumb::server {

namespace {

constexpr const char* kRankerServiceName = "plumb.v1.Ranker";

}  // namespace

Status RankingServer::Start(const EndpointOptions& options, grpc::Service* ranker,
                            std::unique_ptr<RankingServer>* out) {
  std::shared_ptr<grpc::ServerCredentials> credentials;
  PLUMB_RETURN_IF_ERROR(rpc::MakeServerCredentials(
      {options.tls_cert_file, options.tls_key_file, options.tls_client_ca_file}, &credentials));

  // Both are process-wide switches that take effect for servers built afterwards.
  grpc::EnableDefaultHealthCheckService(true);
  if (options.reflection) grpc::reflection::InitProtoReflectionServerBuilderPlugin();

  const int cores = static_cast<int>(std::max(1u, std::thread::hardware_concurrency()));
  const int max_threads = options.max_threads > 0 ? options.max_threads : std::max(16, 8 * cores);

  std::unique_ptr<RankingServer> server(new RankingServer());
  grpc::ServerBuilder builder;
  // gRPC sets SO_REUSEPORT on its listeners by default: a second server on the same port
  // would then start and take a share of the calls. One port, one process.
  builder.AddChannelArgument(GRPC_ARG_ALLOW_REUSEPORT, 0);
  builder.AddListeningPort(options.listen, credentials, &server->port_);
  builder.RegisterService(ranker);
  builder.SetSyncServerOption(grpc::ServerBuilder::SyncServerOption::NUM_CQS, cores);
  // Idle pollers a queue keeps: a thread that finishes a call exits if its queue already
  // has MAX_POLLERS idle ones, and a new one is created when the last poller takes a call.
  // With a small MAX_POLLERS a steady load of a few calls in flight creates and destroys a
  // thread per call (measured: thread creation and stack unmapping were the top of the
  // profile at 4 calls in flight), so every thread the quota allows may stay.
  builder.SetSyncServerOption(grpc::ServerBuilder::SyncServerOption::MIN_POLLERS, 1);
  builder.SetSyncServerOption(grpc::ServerBuilder::SyncServerOption::MAX_POLLERS,
                              std::max(1, max_threads / cores));
  if (options.on_transport_rejection) {
    builder.experimental().SetInterceptorCreators(
        TransportRejectionInterceptors(options.on_transport_rejection));
  }
  grpc::ResourceQuota quota("plumb-serve");
  quota.SetMaxThreads(max_threads);
  builder.SetResourceQuota(quota);
  server->server_ = builder.BuildAndStart();
  if (server->server_ == nullptr || server->port_ == 0) {
    Status why = rpc::ProbeListenAddress(options.listen, "gRPC");
    return why.ok() ? Status::IoError("cannot listen on '" + options.listen + "'") : why;
  }
  server->SetServing(false);
  *out = std::move(server);
  return Status::Ok();
}

RankingServer::~RankingServer() { Shutdown(std::chrono::milliseconds(0)); }

void RankingServer::SetServing(bool serving) {
  grpc::HealthCheckServiceInterface* health = server_->GetHealthCheckService();
  if (health == nullptr) return;
  health->SetServingStatus("", serving);
  health->SetServingStatus(kRankerServiceName, serving);
}

void RankingServer::Shutdown(std::chrono::milliseconds grace) {
  if (shut_down_ || server_ == nullptr) return;
  shut_down_ = true;
  if (grpc::HealthCheckServiceInterface* health = server_->GetHealthCheckService()) {
    health->Shutdown();  // every service NOT_SERVING from now on
  }
  server_->Shutdown(std::chrono::system_clock::now() + grace);
  server_->Wait();
}

}  // namespace plumb::server
