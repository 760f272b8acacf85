#include "server/serve_config.h"

#include <CLI/CLI.hpp>
#include <ostream>

#include "config/flag_file.h"
#include "core/duration.h"

namespace plumb::server {

namespace {

// The duration flags are texts with a unit; ParseServeConfig converts them afterwards.
struct DurationTexts {
  std::string catchup_interval, exposure_window_max_age, shutdown_grace, status_history_step;
};

void DefineOptions(CLI::App& app, config::FlagFile* keys, ServeConfig* c, DurationTexts* d) {
  app.option_defaults()->always_capture_default();
  app.set_version_flag("--version", std::string("plumb-serve ") + PLUMB_VERSION);
  keys->Add("db", &c->db,
            "Store directory written by plumb-train; with --replica-of, this replica's "
            "own directory of received versions (required)");
  app.add_option("--config", c->config_file,
                 "TOML file whose top-level keys are any of these flags' names");
  keys->Add("listen", &c->endpoint.listen, "HOST:PORT for gRPC (port 0: any free port)");
  keys->Add("metrics", &c->metrics,
            "HOST:PORT for Prometheus /metrics (empty string: no metrics endpoint)");
  keys->Add("scratch_dir", &c->scratch_dir,
            "Directory for the RocksDB secondary's own files (default: a temporary "
            "directory unique to this process)");
  d->catchup_interval = FormatDuration(c->catchup_interval_ms);
  keys->Add("catchup_interval", &d->catchup_interval,
            "How often to catch up with the trainer and look for a new active version "
            "(10ms .. 1h)");
  d->status_history_step = FormatDuration(c->status_history_step_ms);
  keys->Add("status_history_step", &d->status_history_step,
            "Spacing of the status page's history points at the metrics address; the "
            "last 1440 are kept (1m: a day) (1s .. 1h)");
  keys->Add("exposure_window_lists", &c->exposure.window_lists,
            "Exposure monitor: the last this many served lists form the window")
      ->check(CLI::Range(1, 10'000'000));
  d->exposure_window_max_age =
      FormatDuration(static_cast<int64_t>(c->exposure.window_seconds * 1000.0 + 0.5));
  keys->Add("exposure_window_max_age", &d->exposure_window_max_age,
            "Exposure monitor: also drop lists older than this (0 = by count only)");
  keys->Add("exposure_groups", &c->exposure.groups,
            "Exposure monitor: popularity groups of equal interaction mass")
      ->check(CLI::Range(1, 100));
  keys->Add("exposure_monitor", &c->exposure_monitor,
            "Count served lists into the exposure window (--no-exposure-monitor: no "
            "exposure gauges)");
  keys->Add("max_count", &c->limits.max_count, "Largest count a request may ask for")
      ->check(CLI::Range(1, 1'000'000));
  keys->Add("max_candidates", &c->limits.max_candidates,
            "Most candidate_item_ids in one RankCandidates request")
      ->check(CLI::Range(1, 1'000'000));
  keys->Add("max_exclusions", &c->limits.max_exclusions, "Most exclude_item_ids in one request")
      ->check(CLI::Range(0, 1'000'000));
  keys->Add("max_recent", &c->limits.max_recent, "Most recent_item_ids in one request")
      ->check(CLI::Range(0, 100'000));
  keys->Add("background_nice", &c->background_nice,
            "CPU niceness of the catch-up thread (snapshot and index builds), so that "
            "requests keep the CPU while a version loads (0: as the process)")
      ->check(CLI::Range(0, 19));
  keys->Add("approx_min_items", &c->approx.min_items,
            "Catalogues of at least this many items are served from approximate indexes "
            "(Recommend, SimilarItems); smaller ones by the exact scan. 0: always exact")
      ->check(CLI::Range(0u, 2'000'000'000u));
  keys->Add("approx_links", &c->approx.index.links,
            "Approximate index: links per node (more: higher recall, more memory)")
      ->check(CLI::Range(4u, 128u));
  keys->Add("approx_build_breadth", &c->approx.index.build_breadth,
            "Approximate index: candidates kept while inserting (more: better graph, "
            "slower build)")
      ->check(CLI::Range(8u, 4096u));
  keys->Add("approx_search_breadth", &c->approx.index.search_breadth,
            "Approximate index: candidates kept while searching (more: higher recall, "
            "slower calls)")
      ->check(CLI::Range(8u, 65'536u));
  keys->Add("approx_similar_search_breadth", &c->approx.similar_search_breadth,
            "Approximate index: candidates kept while searching for SimilarItems")
      ->check(CLI::Range(8u, 65'536u));
  keys->Add("approx_build_threads", &c->approx.index.build_threads,
            "Threads that build a new version's indexes, at a lower CPU priority than "
            "requests")
      ->check(CLI::Range(1u, 256u));
  keys->Add("approx_max_overfetch", &c->approx.max_overfetch,
            "Most excluded items a call asks the index to make up for; a call that "
            "loses more to exclusions is answered by the exact scan")
      ->check(CLI::Range(0u, 1'000'000u));
  keys->Add("fold_in_confidence", &c->fold_in.confidence,
            "Fold-in: confidence weight of an unknown user's recent items")
      ->check(CLI::Range(0.0, 1e6));
  keys->Add("fold_in_l2", &c->fold_in.l2,
            "Fold-in: ridge term as a fraction of the item Gram matrix's mean eigenvalue")
      ->check(CLI::Range(0.0, 1e3));
  keys->Add("max_running_calls", &c->admission.max_running,
            "Ranker calls that score at the same time (0: two per core)")
      ->check(CLI::Range(0, 10'000));
  keys->Add("max_waiting_calls", &c->admission.max_waiting,
            "Ranker calls that wait, first in first out, for a free slot; calls beyond "
            "them get RESOURCE_EXHAUSTED, waiting calls whose deadline passes "
            "DEADLINE_EXCEEDED")
      ->check(CLI::Range(0, 100'000));
  keys->Add("rpc_threads", &c->endpoint.max_threads,
            "Most gRPC server threads (0: running + waiting calls + 16); calls beyond "
            "them get RESOURCE_EXHAUSTED from gRPC itself")
      ->check(CLI::Range(0, 110'000));
  keys->Add("reflection", &c->endpoint.reflection, "Offer gRPC server reflection");
  keys->Add("token_file", &c->token_file,
            "File holding the bearer token every Ranker call must carry "
            "('authorization: Bearer <token>'); empty = no token");
  keys->Add("tls_cert", &c->endpoint.tls_cert_file,
            "PEM certificate chain; with --tls-key, serve over TLS");
  keys->Add("tls_key", &c->endpoint.tls_key_file, "PEM private key for --tls-cert");
  keys->Add("tls_client_ca", &c->endpoint.tls_client_ca_file,
            "PEM CA bundle; when set, clients must present a certificate it signed");
  keys->Add("replica_of", &c->replica_nats.servers,
            "Serve as a remote replica: NATS servers (comma-separated nats://HOST:PORT) "
            "whose version stream and pointer to follow; --db is then a local directory "
            "of received versions (empty: follow the trainer's store at --db)");
  keys->Add("replica_token_file", &c->replica_nats.token_file,
            "File holding the token the NATS servers require");
  keys->Add("replica_credentials_file", &c->replica_nats.credentials_file,
            "NATS credentials file (.creds) for --replica-of");
  keys->Add("replica_tls_ca", &c->replica_nats.tls_ca, "CA to trust: connect to NATS with TLS");
  keys->Add("replica_tls_cert", &c->replica_nats.tls_cert,
            "PEM client certificate chain for NATS (when the servers verify clients)");
  keys->Add("replica_tls_key", &c->replica_nats.tls_key, "PEM key of --replica-tls-cert");
  keys->Add("replica_stream", &c->replica_stream, "The version stream plumb-train fills");
  keys->Add("replica_subject", &c->replica_subject, "Version N is on <this>.N");
  keys->Add("replica_bucket", &c->replica_bucket,
            "Key-value bucket whose key 'active' names the version to serve");
  d->shutdown_grace = FormatDuration(c->shutdown_grace_ms);
  keys->Add("shutdown_grace", &d->shutdown_grace,
            "On SIGTERM/SIGINT, how long in-flight calls may take to finish (up to 10m)");
  keys->Add("log_level", &c->log_level, "trace, debug, info, warn, error, critical, off")
      ->check(CLI::IsMember({"trace", "debug", "info", "warn", "error", "critical", "off"}));
}

// Converts a duration flag's text; false (with the message on `err`) when it is not a
// duration or lies outside [min_ms, max_ms].
bool ConvertDuration(const char* flag, const std::string& text, int64_t min_ms, int64_t max_ms,
                     int64_t* ms, std::ostream& err) {
  Status s = ParseDurationIn(flag, text, min_ms, max_ms, ms);
  if (!s.ok()) err << s.message() << "\n";
  return s.ok();
}

}  // namespace

int ParseServeConfig(int argc, const char* const* argv, ServeConfig* config, std::ostream& out,
                     std::ostream& err) {
  CLI::App app(
      "plumb-serve: answers plumb.v1.Ranker calls from the active embedding version in a "
      "plumb store, following the trainer as a RocksDB secondary.",
      "plumb-serve");
  config::FlagFile keys(&app);
  DurationTexts durations;
  DefineOptions(app, &keys, config, &durations);
  try {
    app.parse(argc, argv);
  } catch (const CLI::ParseError& e) {
    // --help and --version exit 0; every other parse error is a usage error: exit 2.
    return app.exit(e, out, err) == 0 ? 0 : 2;
  }
  if (!config->config_file.empty()) {
    if (Status s = keys.Apply(config->config_file); !s.ok()) {
      err << s.message() << "\n";
      return 2;
    }
  }
  if (config->db.empty()) {
    err << "--db is required (as a flag or as 'db' in the config file)\n";
    return 2;
  }
  int64_t ms = 0;
  if (!ConvertDuration("--catchup-interval", durations.catchup_interval, 10, 3'600'000, &ms, err))
    return 2;
  config->catchup_interval_ms = static_cast<int>(ms);
  if (!ConvertDuration("--shutdown-grace", durations.shutdown_grace, 0, 600'000, &ms, err))
    return 2;
  config->shutdown_grace_ms = static_cast<int>(ms);
  if (!ConvertDuration("--exposure-window-max-age", durations.exposure_window_max_age, 0,
                       30LL * 86'400'000, &ms, err))
    return 2;
  config->exposure.window_seconds = static_cast<double>(ms) / 1000.0;
  if (!ConvertDuration("--status-history-step", durations.status_history_step, 1000, 3'600'000, &ms,
                       err))
    return 2;
  config->status_history_step_ms = ms;
  return -1;
}

}  // namespace plumb::server
