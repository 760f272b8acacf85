// ServeConfig: plumb-serve's settings, from command-line flags and an optional TOML file.
//
// Every setting is a flag (`--max-count 500`) and, under the same name, a top-level key of
// the file given with --config (`max_count = 500`; `max-count` is accepted too). A flag on
// the command line wins over the file; the file wins over the built-in default. Flag names
// follow the vocabulary in DEVELOPERS.md: durations take a unit ("500ms", "5s"), booleans
// are --x / --no-x (true / false in the file).
#pragma once

#include <algorithm>
#include <cstdint>
#include <iosfwd>
#include <string>
#include <thread>

#include "replica/nats_access.h"
#include "server/admission_queue.h"
#include "server/exposure_window.h"
#include "server/fold_in.h"
#include "server/ranker_service.h"
#include "server/ranking_server.h"
#include "server/snapshot.h"

namespace plumb::server {

// plumb-serve's defaults for approximate serving: catalogues from a million items.
inline ApproxServingOptions DefaultApproxServing() {
  // Measured at 1M trained items x 64 (README, "Large catalogues"): build breadth 100 builds
  // in 58 % of 200's time for 0.6 points less recall; the build threads run nice.
  ApproxServingOptions a;
  a.min_items = 1'000'000;
  a.index.build_breadth = 100;
  a.index.build_threads = std::max(1u, std::thread::hardware_concurrency());
  return a;
}

struct ServeConfig {
  std::string db;                          // store directory (required)
  std::string config_file;                 // the TOML file read, if any
  std::string metrics = "127.0.0.1:9464";  // HOST:PORT of /metrics; empty = no metrics
  // The RocksDB secondary's own directory; empty = a fresh temporary directory per process,
  // removed at exit.
  std::string scratch_dir;
  int catchup_interval_ms = 500;   // --catchup-interval
  int shutdown_grace_ms = 5000;    // --shutdown-grace
  // Spacing of the status page's history points (--status-history-step); 1440 are kept.
  int64_t status_history_step_ms = 60000;
  std::string log_level = "info";  // trace, debug, info, warn, error, critical, off
  // File holding the bearer token every Ranker call must carry; empty = no token. Health
  // checks and reflection stay open.
  std::string token_file;
  EndpointOptions endpoint;    // listen, TLS, threads, reflection
  AdmissionOptions admission;  // calls scoring at once, calls waiting for a slot
  RankerLimits limits;
  FoldInOptions fold_in;
  ExposureWindowOptions exposure;
  bool exposure_monitor = true;  // off: no window, no exposure gauges (for measuring its cost)
  // Approximate indexes for large catalogues (off below min_items).
  ApproxServingOptions approx = DefaultApproxServing();
  // Niceness of the catch-up thread (snapshot and index builds); 0: the process's.
  int background_nice = 10;
  // A remote replica (--replica-of, server/replica_feed.h): versions come from these NATS
  // servers' version stream and --db is a local directory of this replica's own. Empty:
  // follow the store at --db (a RocksDB secondary on the trainer's disk).
  // replica_of (the servers), replica_token_file, replica_credentials_file, replica_tls_*.
  replica::NatsSettings replica_nats;
  std::string replica_stream = "PLUMB_VERSIONS";
  std::string replica_subject = "plumb.versions";
  std::string replica_bucket = "PLUMB_POINTER";
};

// Parses argv (and the --config file it names) into *config.
// Returns -1 when the program should go on, or the exit code when it should stop now: 0
// after --help or --version (printed to `out`), 2 after a usage error (message printed to
// `err`). Errors: unknown flags or file keys, values of the wrong type, an unreadable or
// malformed file, a missing --db. Not thread-safe (CLI11 parsing state is local, but the
// streams are shared).
int ParseServeConfig(int argc, const char* const* argv, ServeConfig* config, std::ostream& out,
                     std::ostream& err);

}  // namespace plumb::server
