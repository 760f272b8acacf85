// plumb-train's configuration: a TOML file (--config) whose every key is also a command-line
// flag of the same name with dashes (key commit_window, flag --commit-window). A flag
// given on the command line wins over the file; the file wins over the built-in default.
// deploy/plumb-train.toml documents every key. Names follow the vocabulary in
// DEVELOPERS.md: durations are texts with a unit ("2ms", "30s", "24h"), booleans --x/--no-x.
#pragma once

#include <cstdint>
#include <optional>
#include <string>
#include <string_view>

#include "core/duration.h"
#include "core/status.h"
#include "replica/nats_access.h"
#include "trainer/online/online_loop.h"

namespace plumb::online {

struct TrainConfig {
  std::string config;  // the TOML file read, if any (flag only)

  // Store and transport.
  std::string db;                          // database directory (required)
  std::string listen = "127.0.0.1:7601";   // gRPC address
  std::string metrics = "127.0.0.1:9465";  // Prometheus /metrics address; "" = off
  bool sync = true;                        // fsync the log before acknowledging
  std::string commit_window = "2ms";       // group commit window ("0": none)
  uint32_t max_group_events = 16384;       // events per log write, at most
  uint32_t max_batch_events = 10000;       // PublishBatch limit
  uint32_t keep_versions = 5;              // newest versions kept for rollback...
  std::string keep_versions_for = "2h";    // ...and every version younger than this
  std::string dedup_window = "24h";        // event_id de-duplication window; "0" = forever
  std::string max_future_skew = "1h";      // event timestamps ahead of receipt; "0" = no limit
  int background_nice = 10;  // niceness of training, refit and retention threads (0..19)
  uint64_t min_free_disk_mb = 128;         // free space kept on the store's disk; 0 = no check
  std::string token_file;                  // bearer token file; "" = no token
  std::string tls_cert;                    // PEM certificate chain; "" = no TLS
  std::string tls_key;                     // PEM private key
  bool allow_insecure_remote = false;      // serve a non-loopback address without a token
  std::string shutdown_grace = "5s";       // how long in-flight calls get at shutdown
  std::string log_level = "info";          // trace|debug|info|warn|error|critical|off
  std::string status_history_step = "1m";  // status page history spacing; 1440 points kept

  // Events from a NATS JetStream stream as well as over gRPC (JetStreamSource); off while
  // jetstream_servers is empty. deploy/plumb-train.toml explains each key.
  // jetstream_servers, jetstream_token_file, jetstream_credentials_file, jetstream_tls_*.
  replica::NatsSettings jetstream_nats;
  std::string jetstream_stream = "PLUMB_EVENTS";
  std::string jetstream_subject = "plumb.events";
  std::string jetstream_consumer = "plumb-train";  // durable consumer name
  uint32_t jetstream_fetch_batch = 1000;
  uint64_t jetstream_max_message_bytes = 1 << 20;
  std::string jetstream_ack_wait = "30s";
  uint32_t jetstream_create_replicas = 0;  // > 0: create a missing stream with these replicas
  // Versions to remote serving replicas (replica/version_shipper.h), over the same servers.
  bool jetstream_events = true;     // consume the event stream (off: only ship versions)
  bool jetstream_versions = false;  // ship each activated version and move the pointer
  std::string jetstream_versions_stream = "PLUMB_VERSIONS";
  std::string jetstream_versions_subject = "plumb.versions";  // version N on <subject>.N
  std::string jetstream_pointer_bucket = "PLUMB_POINTER";
  uint32_t jetstream_keep_versions = 10;  // versions kept in the stream

  // The training loop. Its publish_every_seconds is set from publish_interval.
  OnlineOptions online;
  std::string publish_interval = "30s";  // publish a candidate at least this often
  std::string training_window = "0";     // sets online.training_window_ms; "0" = all history

  // Event-log retention (RetentionRunner): events older than retention_max_age (measured back
  // from the newest event) or beyond retention_max_log_mb leave the log once trained on.
  std::string retention_max_age = "0";    // "0" = no age rule
  uint64_t retention_max_log_mb = 0;      // 0 = no size rule
  std::string retention_interval = "1m";  // pause between passes

  // Filled by ParseTrainConfig from the duration texts above.
  double commit_window_ms = 2.0;
  double shutdown_grace_seconds = 5.0;
  int64_t retention_max_age_ms = 0;
  int64_t retention_interval_ms = 60'000;
  int64_t status_history_step_ms = 60000;
};

// Parses the command line (and the TOML file it names), then checks the result. Returns
// nullopt when plumb-train should run with `*config`; otherwise the process exit code after
// printing the help text (0) or an error message (2) to stdout / stderr.
std::optional<int> ParseTrainConfig(int argc, const char* const* argv, TrainConfig* config);

// Converts the duration texts (commit_window, shutdown_grace, publish_interval) into the
// numeric fields; InvalidArgument naming the key for a text that is not a duration.
Status ResolveDurations(TrainConfig* config);

// Checks ranges and combinations (required db, known objective, both TLS paths, ...), after
// ResolveDurations.
Status CheckTrainConfig(const TrainConfig& config);

}  // namespace plumb::online
