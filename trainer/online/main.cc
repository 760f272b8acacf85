// plumb-train: the sidecar trainer. Owns the store as its primary, ingests events over gRPC
// (plumb.v1.EventIngest), trains online (OnlineLoop), serves version control
// (plumb.v1.ModelControl) and Prometheus metrics. SIGTERM/SIGINT: stop accepting, let calls
// in flight finish (up to shutdown_grace), write what is queued, stop the loop
// (it publishes nothing half-done), close the store, exit 0.
#include <prometheus/registry.h>
#include <pthread.h>
#include <signal.h>
#include <spdlog/sinks/stdout_color_sinks.h>
#include <spdlog/spdlog.h>

#include <atomic>
#include <chrono>
#include <cmath>
#include <condition_variable>
#include <cstdio>
#include <cstring>
#include <filesystem>
#include <memory>
#include <mutex>
#include <thread>

#include "core/clock.h"
#include "replica/version_shipper.h"
#include "rpc/listen_probe.h"
#include "status/http_endpoint.h"
#include "status/periodic_task.h"
#include "store/store.h"
#include "trainer/online/group_commit.h"
#include "trainer/online/ingest_service.h"
#include "trainer/online/jetstream_source.h"
#include "trainer/online/online_loop.h"
#include "trainer/online/retention_runner.h"
#include "trainer/online/status_page.h"
#include "trainer/online/train_config.h"
#include "trainer/online/train_metrics.h"
#include "trainer/online/train_server.h"

namespace {

using plumb::NowMs;
using plumb::Status;
using namespace plumb::online;

// Copies the committer's totals and the loop's status into the metrics once a second.
class MetricsPoller {
 public:
  MetricsPoller(TrainMetrics* metrics, GroupCommitter* committer, OnlineLoop* loop,
                const plumb::store::Store* store, const RetentionRunner* retention)
      : thread_([=, this] {
          std::unique_lock<std::mutex> lock(mu_);
          do {
            lock.unlock();
            const OnlineStatus status = loop->status();
            metrics->Refresh(committer->stats(), &status, NowMs());
            plumb::store::LogStats log;
            if (store->GetLogStats(&log).ok()) {
              const RetentionTotals totals = retention->totals();
              metrics->RefreshLog(log, &totals, NowMs());
            }
            lock.lock();
          } while (!cv_.wait_for(lock, std::chrono::seconds(1), [this] { return stop_; }));
        }) {}
  ~MetricsPoller() {
    {
      std::lock_guard<std::mutex> lock(mu_);
      stop_ = true;
    }
    cv_.notify_all();
    thread_.join();
  }

 private:
  std::mutex mu_;
  std::condition_variable cv_;
  bool stop_ = false;
  std::thread thread_;  // last: starts after the members it uses exist
};

// The JetStream event source's options from the configuration (jetstream_* keys).
JetStreamOptions JetStreamOptionsFrom(const TrainConfig& config, const IngestLimits& limits) {
  JetStreamOptions o;
  o.access = plumb::replica::ToNatsAccess(config.jetstream_nats);
  o.stream = config.jetstream_stream;
  o.subject = config.jetstream_subject;
  o.consumer = config.jetstream_consumer;
  o.fetch_batch = static_cast<int>(config.jetstream_fetch_batch);
  o.max_message_bytes = config.jetstream_max_message_bytes;
  o.max_message_events = limits.max_batch_events;
  o.create_replicas = static_cast<int>(config.jetstream_create_replicas);
  o.max_future_skew_ms = limits.max_future_skew_ms;
  // Checked when the configuration was read, so it cannot fail here.
  plumb::ParseDuration(config.jetstream_ack_wait, &o.ack_wait_ms).IgnoreError();
  return o;
}

// The version shipper's options from the configuration (jetstream_* keys).
plumb::replica::VersionShipOptions VersionShipOptionsFrom(const TrainConfig& config) {
  plumb::replica::VersionShipOptions o;
  o.access = plumb::replica::ToNatsAccess(config.jetstream_nats);
  o.stream = config.jetstream_versions_stream;
  o.subject_prefix = config.jetstream_versions_subject;
  o.bucket = config.jetstream_pointer_bucket;
  o.replicas = static_cast<int>(std::max<uint32_t>(1, config.jetstream_create_replicas));
  o.keep_versions = config.jetstream_keep_versions;
  return o;
}

int Run(const TrainConfig& config, const sigset_t& shutdown_signals) {
  // ---- who may call, decided before anything is opened --------------------------------
  TrainEndpointOptions endpoint;
  endpoint.listen = config.listen;
  endpoint.token_file = config.token_file;
  endpoint.allow_insecure_remote = config.allow_insecure_remote;
  endpoint.tls_cert_file = config.tls_cert;
  endpoint.tls_key_file = config.tls_key;
  // A full PublishBatch of events with ids at their limits is about 0.7 KB per event.
  endpoint.max_receive_message_bytes =
      static_cast<int>(std::max<uint64_t>(16u << 20, uint64_t{config.max_batch_events} << 10));
  std::unique_ptr<TrainServer> server;
  if (Status s = TrainServer::Prepare(endpoint, &server); !s.ok()) {
    spdlog::critical("{}", s.message());
    return 2;
  }

  // ---- both addresses free? Checked before the store is opened (or created) -----------
  Status probe = plumb::rpc::ProbeListenAddress(config.listen, "gRPC");
  if (probe.ok() && !config.metrics.empty()) {
    probe = plumb::rpc::ProbeListenAddress(config.metrics, "metrics");
  }
  if (!probe.ok()) {
    spdlog::critical("{}", probe.message());
    return 1;
  }

  // ---- metrics endpoint: fails early and cheaply when its port is taken ---------------
  // It also serves the status page and its JSON (issue 15), once the loop runs.
  TrainMetrics metrics;
  std::atomic<TrainStatusPage*> status_page{nullptr};
  auto StatusReply = [&status_page](bool as_json) {
    TrainStatusPage* page = status_page.load();
    if (page == nullptr) {
      return plumb::status::HttpReply{503, "text/plain; charset=utf-8",
                                      "plumb-train is starting (replaying its store)\n"};
    }
    if (as_json) {
      return plumb::status::HttpReply{
          200, "application/json",
          page->Json(NowMs()).dump(1, ' ', false, nlohmann::json::error_handler_t::replace) + "\n"};
    }
    return plumb::status::HttpReply{200, "text/html; charset=utf-8", page->Html(NowMs())};
  };
  std::unique_ptr<plumb::status::StatusEndpoint> http;
  if (!config.metrics.empty()) {
    http = std::make_unique<plumb::status::StatusEndpoint>();
    http->RegisterCollectable(metrics.registry());
    // Pages are registered now and answer once the loop exists (below); until then they say
    // the trainer is starting.
    http->RegisterPage("/", [&] { return StatusReply(false); });
    http->RegisterPage("/status.json", [&] { return StatusReply(true); });
    if (Status s = http->Start(config.metrics); !s.ok()) {
      const Status why = plumb::rpc::ProbeListenAddress(config.metrics, "metrics");
      spdlog::critical("cannot serve metrics on {}: {}", config.metrics,
                       why.ok() ? s.message() : why.message());
      return 1;
    }
  }

  // ---- store and training loop ------------------------------------------------------
  plumb::store::StoreOptions store_options;
  store_options.create_if_missing = true;
  store_options.sync = config.sync;
  store_options.keep_versions = config.keep_versions;
  if (Status s =
          plumb::ParseDuration(config.keep_versions_for, &store_options.keep_versions_for_ms);
      !s.ok()) {
    spdlog::critical("keep_versions_for: {}", s.message());
    return 2;
  }
  store_options.min_free_disk_bytes = config.min_free_disk_mb << 20;
  if (Status s = plumb::ParseDuration(config.dedup_window, &store_options.dedup_window_ms);
      !s.ok()) {
    spdlog::critical("{}", s.message());
    return 2;
  }
  std::error_code mkdir_error;
  std::filesystem::create_directories(std::filesystem::path(config.db).parent_path(),
                                      mkdir_error);  // the store creates the last level
  std::unique_ptr<plumb::store::Store> store;
  if (Status s = plumb::store::Store::OpenPrimary(config.db, store_options, &store); !s.ok()) {
    // The store reports a directory another process holds as Unavailable.
    const bool held = s.code() == plumb::Status::Code::kUnavailable;
    spdlog::critical("cannot open the store at {} as the primary: {}{}", config.db, s.ToString(),
                     held ? " (another plumb-train or plumb command is writing it; only one "
                            "process may)"
                          : "");
    return 1;
  }
  std::unique_ptr<OnlineLoop> loop;
  if (Status s = OnlineLoop::Create(store.get(), config.online, &loop); !s.ok()) {
    spdlog::critical("cannot start the training loop: {}", s.ToString());
    return 1;
  }
  loop->Start(config.background_nice);
  RetentionOptions retention_options;
  retention_options.max_age_ms = config.retention_max_age_ms;
  retention_options.max_log_bytes = config.retention_max_log_mb << 20;
  retention_options.interval_ms = config.retention_interval_ms;
  RetentionRunner retention(store.get(), retention_options);
  retention.Start(config.background_nice);

  // ---- ingest and control -----------------------------------------------------------
  StoreEventLog event_log(store.get());
  GroupCommitOptions commit_options;
  commit_options.window = std::chrono::microseconds(std::llround(config.commit_window_ms * 1000.0));
  commit_options.max_group_events = config.max_group_events;
  GroupCommitter committer(
      &event_log, [&loop] { loop->NotifyAppended(); }, commit_options);
  IngestLimits limits;
  limits.max_batch_events = config.max_batch_events;
  if (Status s = plumb::ParseDuration(config.max_future_skew, &limits.max_future_skew_ms);
      !s.ok()) {
    spdlog::critical("{}", s.message());
    return 2;
  }
  std::unique_ptr<EventSource> jetstream;
  if (!config.jetstream_nats.servers.empty() && config.jetstream_events) {
    jetstream = std::make_unique<JetStreamSource>(JetStreamOptionsFrom(config, limits), &committer,
                                                  &metrics);
    if (Status s = jetstream->Start(); !s.ok()) {
      spdlog::critical("{}", s.message());
      committer.Close();
      retention.Stop();
      loop->Stop();
      return 2;
    }
    spdlog::info("events also from {}", jetstream->Describe());
  }

  // Versions to remote serving replicas: a watcher of the active version of its own.
  std::unique_ptr<plumb::replica::VersionShipper> shipper;
  if (config.jetstream_versions) {
    shipper = std::make_unique<plumb::replica::VersionShipper>(
        store.get(), VersionShipOptionsFrom(config), metrics.registry().get());
    if (Status s = shipper->Start(); !s.ok()) {
      spdlog::critical("{}", s.message());
      if (jetstream) jetstream->Stop();
      committer.Close();
      retention.Stop();
      loop->Stop();
      return 2;
    }
    spdlog::info("versions shipped to {}", shipper->Describe());
  }

  if (Status s = server->Start(&committer, &metrics, limits, store.get(), loop.get()); !s.ok()) {
    spdlog::critical("cannot listen on {}: {}", config.listen, s.message());
    if (shipper) shipper->Stop();
    if (jetstream) jetstream->Stop();
    committer.Close();
    retention.Stop();
    loop->Stop();
    return 1;
  }

  std::unique_ptr<MetricsPoller> poller =
      std::make_unique<MetricsPoller>(&metrics, &committer, loop.get(), store.get(), &retention);
  TrainStatusOptions status_options;
  status_options.step_ms = config.status_history_step_ms;
  status_options.trainer_address = config.listen;
  TrainStatusPage page(store.get(), loop.get(), &metrics, status_options);
  std::unique_ptr<plumb::status::PeriodicTask> status_sampler;
  if (http != nullptr) {
    status_page.store(&page);
    status_sampler = std::make_unique<plumb::status::PeriodicTask>(
        std::chrono::milliseconds(config.status_history_step_ms),
        [&page] { page.Sample(NowMs()); });
  }
  const OnlineStatus initial = loop->status();
  spdlog::info(
      "plumb-train serving {} (port {}{}{}), metrics {}; store {}: log at {}, active version "
      "{}, objective {}",
      config.listen, server->port(), server->requires_token() ? ", token required" : "",
      server->uses_tls() ? ", TLS" : "", config.metrics.empty() ? "off" : config.metrics, config.db,
      store->LastSequence(), initial.active_version, config.online.objective);

  int signal_number = 0;
  sigwait(&shutdown_signals, &signal_number);
  spdlog::info("{} received: shutting down", strsignal(signal_number));

  // Stop accepting; calls in flight get the grace period, then are cancelled. Handlers
  // waiting for the committer still get their answer: it keeps writing until Close().
  server->Shutdown(std::chrono::milliseconds(std::llround(config.shutdown_grace_seconds * 1e3)));
  server.reset();                    // its services borrow the committer, the store and the loop
  if (jetstream) jetstream->Stop();  // acks what it handed to the committer
  if (shipper) shipper->Stop();
  committer.Close();
  retention.Stop();
  status_sampler.reset();
  status_page.store(nullptr);
  http.reset();
  loop->Stop();
  poller.reset();
  const plumb::online::CommitterStats stats = committer.stats();
  spdlog::info("stopped cleanly: {} events appended, {} duplicates this run; log at {}",
               stats.appended, stats.duplicates, store->LastSequence());
  loop.reset();
  store.reset();
  return 0;
}

}  // namespace

int main(int argc, char** argv) {
  // The shutdown signals are blocked in every thread (threads inherit the mask) and taken
  // synchronously by sigwait in Run: no async-signal-safety concerns.
  sigset_t shutdown_signals;
  sigemptyset(&shutdown_signals);
  sigaddset(&shutdown_signals, SIGTERM);
  sigaddset(&shutdown_signals, SIGINT);
  pthread_sigmask(SIG_BLOCK, &shutdown_signals, nullptr);

  TrainConfig config;
  if (std::optional<int> exit_code = ParseTrainConfig(argc, argv, &config)) return *exit_code;

  auto logger = spdlog::stderr_color_mt("plumb-train");
  spdlog::set_default_logger(logger);
  spdlog::set_level(spdlog::level::from_str(config.log_level));
  return Run(config, shutdown_signals);
}
