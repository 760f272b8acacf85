// plumb-train's configuration: a TOML file (--config) whose every key is also a command-line
// flag of the same name with dashes (key commit_window_ms, flag --commit-window-ms). A flag
// given on the command line wins over the file; the file wins over the built-in default.
// deploy/plumb-train.toml documents every key.
#pragma once

#include <cstdint>
#include <optional>
#include <string>
#include <string_view>

#include "core/duration.h"
#include "core/status.h"
#include "trainer/online/online_loop.h"

namespace plumb::online {

struct TrainConfig {
  std::string config;  // the TOML file read, if any (flag only)

  // Store and transport.
  std::string db;                          // database directory (required)
  std::string listen = "127.0.0.1:7601";   // gRPC address
  std::string metrics = "127.0.0.1:9465";  // Prometheus /metrics address; "" = off
  bool sync = true;                        // fsync the log before acknowledging
  double commit_window_ms = 2.0;           // group commit window
  uint32_t max_group_events = 16384;       // events per log write, at most
  uint32_t max_batch_events = 10000;       // PublishBatch limit
  uint32_t keep_versions = 5;              // newest versions kept for rollback...
  std::string keep_versions_for = "2h";    // ...and every version younger than this
  std::string dedup_window = "24h";        // event_id de-duplication window; "0" = forever
  std::string max_future_skew = "1h";      // event timestamps ahead of receipt; "0" = no limit
  uint64_t min_free_disk_mb = 128;         // free space kept on the store's disk; 0 = no check
  std::string token_file;                  // bearer token file; "" = no token
  std::string tls_cert;                    // PEM certificate chain; "" = no TLS
  std::string tls_key;                     // PEM private key
  bool allow_insecure_remote = false;      // serve a non-loopback address without a token
  double shutdown_grace_seconds = 5.0;     // how long in-flight calls get at shutdown
  std::string log_level = "info";          // trace|debug|info|warn|error|critical|off

  // The training loop.
  OnlineOptions online;
};

// Parses the command line (and the TOML file it names), then checks the result. Returns
// nullopt when plumb-train should run with `*config`; otherwise the process exit code after
// printing the help text (0) or an error message (2) to stdout / stderr.
std::optional<int> ParseTrainConfig(int argc, const char* const* argv, TrainConfig* config);

// Checks ranges and combinations (required db, known objective, both TLS paths, ...).
Status CheckTrainConfig(const TrainConfig& config);


}  // namespace plumb::online
