#include "server/serve_config.h"

#include <toml++/toml.h>

#include <CLI/CLI.hpp>
#include <algorithm>
#include <limits>
#include <ostream>
#include <sstream>

#include "core/duration.h"

namespace plumb::server {

namespace {

// The duration flags are texts with a unit; ParseServeConfig converts them afterwards.
struct DurationTexts {
  std::string catchup_interval, exposure_window_max_age, shutdown_grace, status_history_step;
};

void DefineOptions(CLI::App& app, ServeConfig* c, DurationTexts* d) {
  app.option_defaults()->always_capture_default();
  app.set_version_flag("--version", std::string("plumb-serve ") + PLUMB_VERSION);
  app.add_option("--db", c->db,
                 "Store directory written by plumb-train; with --replica-of, this replica's "
                 "own directory of received versions (required)");
  app.add_option("--config", c->config_file,
                 "TOML file whose top-level keys are any of these flags' names");
  app.add_option("--listen", c->endpoint.listen, "HOST:PORT for gRPC (port 0: any free port)");
  app.add_option("--metrics", c->metrics,
                 "HOST:PORT for Prometheus /metrics (empty string: no metrics endpoint)");
  app.add_option("--scratch-dir", c->scratch_dir,
                 "Directory for the RocksDB secondary's own files (default: a temporary "
                 "directory unique to this process)");
  d->catchup_interval = FormatDuration(c->catchup_interval_ms);
  app.add_option("--catchup-interval", d->catchup_interval,
                 "How often to catch up with the trainer and look for a new active version "
                 "(10ms .. 1h)");
  d->status_history_step = FormatDuration(c->status_history_step_ms);
  app.add_option("--status-history-step", d->status_history_step,
                 "Spacing of the status page's history points at the metrics address; the "
                 "last 1440 are kept (1m: a day) (1s .. 1h)");
  app.add_option("--exposure-window-lists", c->exposure.window_lists,
                 "Exposure monitor: the last this many served lists form the window")
      ->check(CLI::Range(1, 10'000'000));
  d->exposure_window_max_age =
      FormatDuration(static_cast<int64_t>(c->exposure.window_seconds * 1000.0 + 0.5));
  app.add_option("--exposure-window-max-age", d->exposure_window_max_age,
                 "Exposure monitor: also drop lists older than this (0 = by count only)");
  app.add_option("--exposure-groups", c->exposure.groups,
                 "Exposure monitor: popularity groups of equal interaction mass")
      ->check(CLI::Range(1, 100));
  app.add_flag("--exposure-monitor,!--no-exposure-monitor", c->exposure_monitor,
               "Count served lists into the exposure window (--no-exposure-monitor: no "
               "exposure gauges)");
  app.add_option("--max-count", c->limits.max_count, "Largest count a request may ask for")
      ->check(CLI::Range(1, 1'000'000));
  app.add_option("--max-candidates", c->limits.max_candidates,
                 "Most candidate_item_ids in one RankCandidates request")
      ->check(CLI::Range(1, 1'000'000));
  app.add_option("--max-exclusions", c->limits.max_exclusions,
                 "Most exclude_item_ids in one request")
      ->check(CLI::Range(0, 1'000'000));
  app.add_option("--max-recent", c->limits.max_recent, "Most recent_item_ids in one request")
      ->check(CLI::Range(0, 100'000));
  app.add_option("--background-nice", c->background_nice,
                 "CPU niceness of the catch-up thread (snapshot and index builds), so that "
                 "requests keep the CPU while a version loads (0: as the process)")
      ->check(CLI::Range(0, 19));
  app.add_option("--approx-min-items", c->approx.min_items,
                 "Catalogues of at least this many items are served from approximate indexes "
                 "(Recommend, SimilarItems); smaller ones by the exact scan. 0: always exact")
      ->check(CLI::Range(0u, 2'000'000'000u));
  app.add_option("--approx-links", c->approx.index.links,
                 "Approximate index: links per node (more: higher recall, more memory)")
      ->check(CLI::Range(4u, 128u));
  app.add_option("--approx-build-breadth", c->approx.index.build_breadth,
                 "Approximate index: candidates kept while inserting (more: better graph, "
                 "slower build)")
      ->check(CLI::Range(8u, 4096u));
  app.add_option("--approx-search-breadth", c->approx.index.search_breadth,
                 "Approximate index: candidates kept while searching (more: higher recall, "
                 "slower calls)")
      ->check(CLI::Range(8u, 65'536u));
  app.add_option("--approx-similar-search-breadth", c->approx.similar_search_breadth,
                 "Approximate index: candidates kept while searching for SimilarItems")
      ->check(CLI::Range(8u, 65'536u));
  app.add_option("--approx-build-threads", c->approx.index.build_threads,
                 "Threads that build a new version's indexes, at a lower CPU priority than "
                 "requests")
      ->check(CLI::Range(1u, 256u));
  app.add_option("--approx-max-overfetch", c->approx.max_overfetch,
                 "Most excluded items a call asks the index to make up for; a call that "
                 "loses more to exclusions is answered by the exact scan")
      ->check(CLI::Range(0u, 1'000'000u));
  app.add_option("--fold-in-confidence", c->fold_in.confidence,
                 "Fold-in: confidence weight of an unknown user's recent items")
      ->check(CLI::Range(0.0, 1e6));
  app.add_option("--fold-in-l2", c->fold_in.l2,
                 "Fold-in: ridge term as a fraction of the item Gram matrix's mean eigenvalue")
      ->check(CLI::Range(0.0, 1e3));
  app.add_option("--max-running-calls", c->admission.max_running,
                 "Ranker calls that score at the same time (0: two per core)")
      ->check(CLI::Range(0, 10'000));
  app.add_option("--max-waiting-calls", c->admission.max_waiting,
                 "Ranker calls that wait, first in first out, for a free slot; calls beyond "
                 "them get RESOURCE_EXHAUSTED, waiting calls whose deadline passes "
                 "DEADLINE_EXCEEDED")
      ->check(CLI::Range(0, 100'000));
  app.add_option("--rpc-threads", c->endpoint.max_threads,
                 "Most gRPC server threads (0: running + waiting calls + 16); calls beyond "
                 "them get RESOURCE_EXHAUSTED from gRPC itself")
      ->check(CLI::Range(0, 110'000));
  app.add_flag("--reflection,!--no-reflection", c->endpoint.reflection,
               "Offer gRPC server reflection");
  app.add_option("--token-file", c->token_file,
                 "File holding the bearer token every Ranker call must carry "
                 "('authorization: Bearer <token>'); empty = no token");
  app.add_option("--tls-cert", c->endpoint.tls_cert_file,
                 "PEM certificate chain; with --tls-key, serve over TLS");
  app.add_option("--tls-key", c->endpoint.tls_key_file, "PEM private key for --tls-cert");
  app.add_option("--tls-client-ca", c->endpoint.tls_client_ca_file,
                 "PEM CA bundle; when set, clients must present a certificate it signed");
  app.add_option("--replica-of", c->replica_of,
                 "Serve as a remote replica: NATS servers (comma-separated nats://HOST:PORT) "
                 "whose version stream and pointer to follow; --db is then a local directory "
                 "of received versions (empty: follow the trainer's store at --db)");
  app.add_option("--replica-token-file", c->replica_token_file,
                 "File holding the token the NATS servers require");
  app.add_option("--replica-credentials-file", c->replica_credentials_file,
                 "NATS credentials file (.creds) for --replica-of");
  app.add_option("--replica-tls-ca", c->replica_tls_ca, "CA to trust: connect to NATS with TLS");
  app.add_option("--replica-tls-cert", c->replica_tls_cert,
                 "PEM client certificate chain for NATS (when the servers verify clients)");
  app.add_option("--replica-tls-key", c->replica_tls_key, "PEM key of --replica-tls-cert");
  app.add_option("--replica-stream", c->replica_stream, "The version stream plumb-train fills");
  app.add_option("--replica-subject", c->replica_subject, "Version N is on <this>.N");
  app.add_option("--replica-bucket", c->replica_bucket,
                 "Key-value bucket whose key 'active' names the version to serve");
  d->shutdown_grace = FormatDuration(c->shutdown_grace_ms);
  app.add_option("--shutdown-grace", d->shutdown_grace,
                 "On SIGTERM/SIGINT, how long in-flight calls may take to finish (up to 10m)");
  app.add_option("--log-level", c->log_level, "trace, debug, info, warn, error, critical, off")
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

// A TOML value as the text a flag would carry, or empty with *error set.
std::string ValueText(const toml::node& node, std::string* error) {
  if (const auto* s = node.as_string()) return s->get();
  if (const auto* i = node.as_integer()) return std::to_string(i->get());
  if (const auto* b = node.as_boolean()) return b->get() ? "true" : "false";
  if (const auto* f = node.as_floating_point()) {
    std::ostringstream text;
    text.precision(std::numeric_limits<double>::max_digits10);
    text << f->get();
    return text.str();
  }
  *error = "must be a string, integer, float or boolean";
  return {};
}

// Applies every key of the file to the option of the same name, unless the command line
// already set it.
bool ApplyConfigFile(CLI::App& app, const std::string& path, std::ostream& err) {
  toml::table table;
  try {
    table = toml::parse_file(path);
  } catch (const toml::parse_error& e) {
    err << "config file '" << path << "': " << e.description() << " (line " << e.source().begin.line
        << ")\n";
    return false;
  }
  for (const auto& [raw_key, node] : table) {
    std::string key(raw_key.str());
    std::replace(key.begin(), key.end(), '_', '-');
    CLI::Option* option = key == "config" || key == "version" || key == "help"
                              ? nullptr
                              : app.get_option_no_throw("--" + key);
    if (option == nullptr) {
      err << "config file '" << path << "': unknown key '" << raw_key.str() << "'\n";
      return false;
    }
    if (option->count() > 0) continue;  // the command line wins
    std::string error;
    std::string text = ValueText(node, &error);
    if (!error.empty()) {
      err << "config file '" << path << "': key '" << raw_key.str() << "' " << error << "\n";
      return false;
    }
    try {
      option->add_result(text);
      option->run_callback();
    } catch (const CLI::Error& e) {
      err << "config file '" << path << "': key '" << raw_key.str() << "': " << e.what() << "\n";
      return false;
    }
  }
  return true;
}

}  // namespace

int ParseServeConfig(int argc, const char* const* argv, ServeConfig* config, std::ostream& out,
                     std::ostream& err) {
  CLI::App app(
      "plumb-serve: answers plumb.v1.Ranker calls from the active embedding version in a "
      "plumb store, following the trainer as a RocksDB secondary.",
      "plumb-serve");
  DurationTexts durations;
  DefineOptions(app, config, &durations);
  try {
    app.parse(argc, argv);
  } catch (const CLI::ParseError& e) {
    // --help and --version exit 0; every other parse error is a usage error: exit 2.
    return app.exit(e, out, err) == 0 ? 0 : 2;
  }
  if (!config->config_file.empty() && !ApplyConfigFile(app, config->config_file, err)) return 2;
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
