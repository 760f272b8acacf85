// plumb-serve: the ranking endpoint. Follows the trainer's store as a RocksDB secondary,
// serves plumb.v1.Ranker from the active version, hot-swaps new versions, exports
// Prometheus metrics. See serve_config.h for the settings.
#include <signal.h>
#include <spdlog/sinks/stdout_color_sinks.h>
#include <spdlog/spdlog.h>
#include <stdlib.h>

#include <atomic>
#include <cstdio>
#include <filesystem>
#include <iostream>
#include <memory>

#include "core/clock.h"
#include "rpc/bearer_auth.h"
#include "rpc/listen_address.h"
#include "rpc/listen_probe.h"
#include "server/admission_queue.h"
#include "server/canary_exposure.h"
#include "server/catch_up_loop.h"
#include "server/exposure_metrics.h"
#include "server/exposure_sink.h"
#include "server/exposure_window.h"
#include "server/ranker_service.h"
#include "server/ranking_server.h"
#include "server/replica_feed.h"
#include "server/scorer.h"
#include "server/serve_config.h"
#include "server/serving_metrics.h"
#include "server/snapshot_holder.h"
#include "server/status_page.h"
#include "status/http_endpoint.h"
#include "status/periodic_task.h"
#include "store/store.h"

namespace {

using namespace plumb::server;
using plumb::NowMs;

// A directory of our own for the secondary's info log, removed at exit if we made it.
class ScratchDir {
 public:
  plumb::Status Init(const std::string& wanted) {
    if (!wanted.empty()) {
      path_ = wanted;
      return plumb::Status::Ok();
    }
    std::error_code ec;
    std::filesystem::path base = std::filesystem::temp_directory_path(ec);
    if (ec) base = "/tmp";
    std::string templ = (base / "plumb-serve-XXXXXX").string();
    if (::mkdtemp(templ.data()) == nullptr) {
      return plumb::Status::IoError("cannot create a scratch directory under " + base.string());
    }
    path_ = templ;
    owned_ = true;
    return plumb::Status::Ok();
  }
  ~ScratchDir() {
    if (!owned_) return;
    std::error_code ec;
    std::filesystem::remove_all(path_, ec);
  }
  const std::string& path() const { return path_; }

 private:
  std::string path_;
  bool owned_ = false;
};

// The replica feed's options from the configuration (replica_* keys).
ReplicaOptions ReplicaOptionsFrom(const ServeConfig& config) {
  ReplicaOptions o;
  o.access = plumb::replica::ToNatsAccess(config.replica_nats);
  o.stream = config.replica_stream;
  o.subject_prefix = config.replica_subject;
  o.bucket = config.replica_bucket;
  o.dir = config.db;
  o.interval = std::chrono::milliseconds(config.catchup_interval_ms);
  return o;
}

int Serve(const ServeConfig& config, const sigset_t& signals) {
  // Both addresses are checked before the store is opened and a snapshot loaded (seconds on
  // a large catalogue): a port held by another process is reported at once.
  plumb::Status s = plumb::rpc::ProbeListenAddress(config.endpoint.listen, "gRPC");
  if (s.ok() && !config.metrics.empty()) {
    s = plumb::rpc::ProbeListenAddress(config.metrics, "metrics");
  }
  if (!s.ok()) {
    spdlog::critical("{}", s.message());
    return 1;
  }
  ScratchDir scratch;
  s = scratch.Init(config.scratch_dir);
  if (!s.ok()) {
    spdlog::critical("{}", s.ToString());
    return 1;
  }
  std::unique_ptr<plumb::store::Store> store;
  std::unique_ptr<ReplicaFeed> feed;
  if (!config.replica_nats.servers.empty()) {
    feed = std::make_unique<ReplicaFeed>(ReplicaOptionsFrom(config));
    s = feed->Open();
    if (!s.ok()) {
      spdlog::critical("cannot serve as a replica: {}", s.ToString());
      return s.code() == plumb::Status::Code::kInvalidArgument ? 2 : 1;
    }
  } else {
    s = plumb::store::Store::OpenSecondary(config.db, scratch.path(), &store);
  }
  if (!s.ok()) {
    spdlog::critical("cannot open store '{}' as a secondary: {}", config.db, s.ToString());
    return 1;
  }

  std::unique_ptr<plumb::rpc::BearerAuth> auth;
  if (!config.token_file.empty()) {
    std::string warning;
    s = plumb::rpc::BearerAuth::FromFile(config.token_file, &auth, &warning);
    if (!s.ok()) {
      spdlog::critical("cannot load the bearer token: {}", s.ToString());
      return 2;
    }
    if (!warning.empty()) spdlog::warn("{}", warning);
    if (config.endpoint.tls_cert_file.empty() &&
        !plumb::rpc::IsLoopbackAddress(config.endpoint.listen)) {
      spdlog::warn("the bearer token travels in clear text to {}: configure tls_cert/tls_key",
                   config.endpoint.listen);
    }
  } else if (!plumb::rpc::IsLoopbackAddress(config.endpoint.listen)) {
    spdlog::warn(
        "serving {} without a token: anyone who can reach it can ask for any user's "
        "recommendations and learn whether a user is known (README: operations). Set "
        "token_file, or keep the address inside the product's trusted network.",
        config.endpoint.listen);
  }

  SnapshotHolder holder;
  Scorer scorer(config.fold_in);
  ExposureCounter exposure;
  ExposureWindow window(config.exposure);
  // Each arm of a canary is watched apart (its windows exist only while a canary runs).
  auto canary_exposure = std::make_shared<CanaryExposure>(&holder, config.exposure);
  ExposureTee monitors(config.exposure_monitor ? &window : nullptr, canary_exposure.get());
  ExposureTee exposure_tee(&exposure, &monitors);
  std::atomic<RankingServer*> endpoint{nullptr};
  CatchUpOptions follow;
  follow.interval = std::chrono::milliseconds(config.catchup_interval_ms);
  follow.approx = config.approx;
  follow.on_swap = [&endpoint](const Snapshot&, double) {
    if (RankingServer* server = endpoint.load()) server->SetServing(true);
  };
  CatchUpLoop loop =
      feed ? CatchUpLoop(feed.get(), &holder, follow) : CatchUpLoop(store.get(), &holder, follow);
  // Load what is on disk before listening, so that a restarted server is ready at once
  // even if no trainer runs.
  s = loop.RunOnce();
  if (holder.Get() == nullptr) {
    spdlog::warn(
        "no loadable active version in '{}' yet{}; answering UNAVAILABLE until one "
        "appears",
        config.db, s.ok() ? "" : " (" + s.ToString() + ")");
  }

  auto metrics = std::make_shared<ServingMetrics>(&holder, &loop, &exposure);
  AdmissionQueue admission(config.admission);
  metrics->set_admission(&admission);
  RankerService service(&holder, &scorer, config.limits, &exposure_tee, metrics.get());
  service.set_admission(&admission);
  service.set_auth(auth.get());
  auto exposure_metrics = std::make_shared<ExposureMetrics>(&holder, &window);

  // The metrics address also serves the status page and its JSON (issue 15); the page's
  // history is sampled by its own timer, never by a request.
  ServeStatusOptions status_options;
  status_options.step_ms = config.status_history_step_ms;
  ServeStatusPage status_page(&holder, config.exposure_monitor ? &window : nullptr, metrics.get(),
                              &loop, status_options);
  std::unique_ptr<plumb::status::StatusEndpoint> http;
  std::unique_ptr<plumb::status::PeriodicTask> status_sampler;
  if (!config.metrics.empty()) {
    http = std::make_unique<plumb::status::StatusEndpoint>();
    http->RegisterCollectable(metrics);
    if (config.exposure_monitor) http->RegisterCollectable(exposure_metrics);
    http->RegisterCollectable(canary_exposure);
    if (feed) http->RegisterCollectable(feed->registry());
    http->RegisterPage("/", [&status_page] {
      return plumb::status::HttpReply{200, "text/html; charset=utf-8", status_page.Html(NowMs())};
    });
    http->RegisterPage("/status.json", [&status_page] {
      return plumb::status::HttpReply{
          200, "application/json",
          status_page.Json(NowMs()).dump(1, ' ', false, nlohmann::json::error_handler_t::replace) +
              "\n"};
    });
    s = http->Start(config.metrics);
    if (!s.ok()) {
      const plumb::Status why = plumb::rpc::ProbeListenAddress(config.metrics, "metrics");
      spdlog::critical("cannot serve metrics on '{}': {}", config.metrics,
                       why.ok() ? s.message() : why.message());
      return 1;
    }
    for (int port : http->ListeningPorts())
      spdlog::info("metrics on port {} (status page at /)", port);
    status_sampler = std::make_unique<plumb::status::PeriodicTask>(
        std::chrono::milliseconds(config.status_history_step_ms),
        [&status_page] { status_page.Sample(NowMs()); });
  }

  EndpointOptions endpoint_options = config.endpoint;
  if (endpoint_options.max_threads == 0) {
    // Room for every running and waiting call, and for health checks and reflection.
    endpoint_options.max_threads = admission.max_running() + admission.max_waiting() + 16;
  }
  endpoint_options.on_transport_rejection = [m = metrics.get()](std::string_view method) {
    m->ObserveRejection(method, Rejection::kThreadPool);
  };
  std::unique_ptr<RankingServer> server;
  s = RankingServer::Start(endpoint_options, &service, &server);
  if (!s.ok()) {
    spdlog::critical("cannot serve gRPC on '{}': {}", config.endpoint.listen, s.message());
    return 1;
  }
  endpoint.store(server.get());
  server->SetServing(holder.Get() != nullptr);
  loop.Start(config.background_nice);
  if (feed) {
    feed->Start();
    spdlog::info("replica of {}", feed->Describe());
  }
  spdlog::info(
      "plumb-serve listening on port {} ({}{}{}), metrics on {}; {} calls score at once, {} more "
      "wait, {} threads",
      server->port(), config.endpoint.listen, config.endpoint.tls_cert_file.empty() ? "" : ", TLS",
      auth ? ", token required" : "", config.metrics.empty() ? "none" : config.metrics,
      admission.max_running(), admission.max_waiting(), endpoint_options.max_threads);

  int signal_number = 0;
  sigwait(&signals, &signal_number);
  spdlog::info("received {}; finishing in-flight calls (up to {} ms) and stopping",
               signal_number == SIGTERM ? "SIGTERM" : "SIGINT", config.shutdown_grace_ms);
  server->Shutdown(std::chrono::milliseconds(config.shutdown_grace_ms));
  if (feed) feed->Stop();
  loop.Stop();
  endpoint.store(nullptr);
  status_sampler.reset();
  http.reset();
  server.reset();
  spdlog::info("stopped after serving {} lists", exposure.lists());
  return 0;
}

}  // namespace

int main(int argc, char** argv) {
  // Block the shutdown signals before any thread exists, so that every thread (gRPC's,
  // RocksDB's, the HTTP endpoint's, the catch-up loop) inherits the mask and only sigwait sees
  // them.
  sigset_t signals;
  sigemptyset(&signals);
  sigaddset(&signals, SIGTERM);
  sigaddset(&signals, SIGINT);
  pthread_sigmask(SIG_BLOCK, &signals, nullptr);

  ServeConfig config;
  const int exit_code = ParseServeConfig(argc, argv, &config, std::cout, std::cerr);
  if (exit_code >= 0) return exit_code;

  auto logger = spdlog::stderr_color_mt("plumb-serve");
  spdlog::set_default_logger(logger);
  spdlog::set_level(spdlog::level::from_str(config.log_level));
  return Serve(config, signals);
}
