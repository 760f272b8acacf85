#include "trainer/online/train_config.h"

#include <toml++/toml.h>

#include <CLI/CLI.hpp>
#include <charconv>
#include <cstdio>
#include <functional>
#include <limits>
#include <type_traits>
#include <vector>

namespace plumb::online {
namespace {

// One configuration key: its TOML name, the flag that sets it, and how to set it from a
// TOML value (returns an error text, empty when fine).
struct Key {
  std::string name;
  CLI::Option* option = nullptr;
  std::function<std::string(const toml::node&)> assign;
};

std::string FlagName(std::string_view key) {
  std::string flag = "--";
  for (char c : key) flag += c == '_' ? '-' : c;
  return flag;
}

template <typename T>
std::string AssignFromToml(const toml::node& node, T* field) {
  if constexpr (std::is_same_v<T, bool>) {
    if (auto v = node.value_exact<bool>()) {
      *field = *v;
      return {};
    }
    return "expects true or false";
  } else if constexpr (std::is_same_v<T, std::string>) {
    if (auto v = node.value_exact<std::string>()) {
      *field = *v;
      return {};
    }
    return "expects a string";
  } else if constexpr (std::is_same_v<T, std::vector<double>>) {
    const toml::array* array = node.as_array();
    if (array == nullptr) return "expects an array of numbers, e.g. [1, 2, 3]";
    std::vector<double> values;
    for (const toml::node& element : *array) {
      auto v = element.value<double>();
      if (!v) return "expects an array of numbers, e.g. [1, 2, 3]";
      values.push_back(*v);
    }
    *field = std::move(values);
    return {};
  } else if constexpr (std::is_integral_v<T>) {
    auto v = node.value_exact<int64_t>();
    if (!v) return "expects an integer";
    if (*v < 0 && std::is_unsigned_v<T>) return "must not be negative";
    if (static_cast<uint64_t>(*v) > static_cast<uint64_t>(std::numeric_limits<T>::max())) {
      return "is too large";
    }
    *field = static_cast<T>(*v);
    return {};
  } else {
    auto v = node.value<double>();  // integers are accepted for floating-point keys
    if (!v) return "expects a number";
    *field = static_cast<T>(*v);
    return {};
  }
}

template <typename T>
void Bind(CLI::App& app, std::vector<Key>* keys, const std::string& group, const std::string& name,
          T* field, const std::string& help) {
  CLI::Option* option;
  if constexpr (std::is_same_v<T, bool>) {
    const std::string flag = FlagName(name);
    option = app.add_flag(flag + ",!--no-" + flag.substr(2), *field,
                          help + " [default: " + (*field ? "on" : "off") + "]");
  } else if constexpr (std::is_same_v<T, std::vector<double>>) {
    std::string shown;
    for (double v : *field) {
      char buf[32];
      std::snprintf(buf, sizeof buf, "%s%g", shown.empty() ? "" : ",", v);
      shown += buf;
    }
    option = app.add_option(FlagName(name), *field, help)
                 ->delimiter(',')
                 ->default_str(shown.empty() ? "none" : shown);
  } else {
    option = app.add_option(FlagName(name), *field, help)->capture_default_str();
  }
  option->group(group);
  keys->push_back(
      {name, option, [field](const toml::node& node) { return AssignFromToml(node, field); }});
}

bool OneOf(const std::string& value, std::initializer_list<const char*> allowed) {
  for (const char* a : allowed) {
    if (value == a) return true;
  }
  return false;
}

}  // namespace

Status ResolveDurations(TrainConfig* c) {
  int64_t ms = 0;
  auto resolve = [&](const char* key, const std::string& text) {
    Status s = ParseDuration(text, &ms);
    return s.ok() ? s : Status::InvalidArgument(std::string(key) + ": " + s.message());
  };
  PLUMB_RETURN_IF_ERROR(resolve("commit_window", c->commit_window));
  c->commit_window_ms = static_cast<double>(ms);
  PLUMB_RETURN_IF_ERROR(resolve("shutdown_grace", c->shutdown_grace));
  c->shutdown_grace_seconds = static_cast<double>(ms) / 1000.0;
  PLUMB_RETURN_IF_ERROR(resolve("status_history_step", c->status_history_step));
  c->status_history_step_ms = ms;
  PLUMB_RETURN_IF_ERROR(resolve("publish_interval", c->publish_interval));
  c->online.publish_every_seconds = static_cast<double>(ms) / 1000.0;
  PLUMB_RETURN_IF_ERROR(resolve("training_window", c->training_window));
  c->online.training_window_ms = ms;
  PLUMB_RETURN_IF_ERROR(resolve("retention_max_age", c->retention_max_age));
  c->retention_max_age_ms = ms;
  PLUMB_RETURN_IF_ERROR(resolve("retention_interval", c->retention_interval));
  c->retention_interval_ms = ms;
  return Status::Ok();
}

Status CheckTrainConfig(const TrainConfig& c) {
  auto bad = [](const std::string& what) { return Status::InvalidArgument(what); };
  if (c.db.empty()) return bad("no database directory: give --db DIR or db = \"DIR\"");
  if (c.listen.empty()) return bad("listen is empty");
  if (!(c.commit_window_ms >= 0 && c.commit_window_ms <= 1000)) {
    return bad("commit_window must be within [0, 1s]");
  }
  if (c.max_group_events < 1) return bad("max_group_events must be at least 1");
  if (c.max_batch_events < 1 || c.max_batch_events > 100000) {
    return bad("max_batch_events must be within [1, 100000]");
  }
  if (c.keep_versions < 1) return bad("keep_versions must be at least 1");
  if (c.retention_interval_ms < 100) return bad("retention_interval must be at least 100ms");
  if (c.background_nice < 0 || c.background_nice > 19) {
    return bad("background_nice must be within [0, 19]");
  }
  if (c.retention_max_log_mb > (uint64_t{1} << 40)) return bad("retention_max_log_mb is too large");
  int64_t ms;
  PLUMB_RETURN_IF_ERROR(ParseDuration(c.dedup_window, &ms));
  if (Status s = ParseDuration(c.keep_versions_for, &ms); !s.ok()) {
    return bad("keep_versions_for: " + s.message());
  }
  PLUMB_RETURN_IF_ERROR(ParseDuration(c.max_future_skew, &ms));
  if (c.tls_cert.empty() != c.tls_key.empty()) {
    return bad("TLS needs both tls_cert and tls_key (or neither)");
  }
  if (!c.jetstream_servers.empty()) {
    if (c.jetstream_stream.empty() || c.jetstream_subject.empty() || c.jetstream_consumer.empty()) {
      return bad("jetstream_stream, jetstream_subject and jetstream_consumer must not be empty");
    }
    if (c.jetstream_fetch_batch < 1 || c.jetstream_fetch_batch > 100000) {
      return bad("jetstream_fetch_batch must be within [1, 100000]");
    }
    if (c.jetstream_max_message_bytes < 1) {
      return bad("jetstream_max_message_bytes must be at least 1");
    }
    if (c.jetstream_create_replicas > 5) {
      return bad("jetstream_create_replicas must be within [0, 5] (JetStream's limit)");
    }
    if (c.jetstream_tls_cert.empty() != c.jetstream_tls_key.empty()) {
      return bad("jetstream_tls_cert and jetstream_tls_key go together");
    }
    if (Status s = ParseDuration(c.jetstream_ack_wait, &ms); !s.ok() || ms < 1000) {
      return bad("jetstream_ack_wait must be a duration of at least 1s");
    }
  }
  if (c.jetstream_versions) {
    if (c.jetstream_servers.empty()) return bad("jetstream_versions needs jetstream_servers");
    if (c.jetstream_versions_stream.empty() || c.jetstream_versions_subject.empty() ||
        c.jetstream_pointer_bucket.empty()) {
      return bad(
          "jetstream_versions_stream, jetstream_versions_subject and jetstream_pointer_bucket "
          "must not be empty");
    }
    if (c.jetstream_keep_versions < 1) return bad("jetstream_keep_versions must be at least 1");
  }
  if (c.status_history_step_ms < 1000 || c.status_history_step_ms > 3'600'000) {
    return bad("status_history_step must be within [1s, 1h]");
  }
  if (!(c.shutdown_grace_seconds >= 0 && c.shutdown_grace_seconds <= 600)) {
    return bad("shutdown_grace must be within [0, 10m]");
  }
  if (!OneOf(c.log_level, {"trace", "debug", "info", "warn", "error", "critical", "off"})) {
    return bad("log_level must be trace, debug, info, warn, error, critical or off");
  }
  const OnlineOptions& o = c.online;
  if (!OneOf(o.objective, {"cpr", "bpr", "bce"})) return bad("objective must be cpr, bpr or bce");
  if (!OneOf(o.optimizer, {"sgd", "adagrad"})) return bad("optimizer must be sgd or adagrad");
  if (o.dim < 1 || o.dim > 4096) return bad("dim must be within [1, 4096]");
  if (o.cpr_k < 2) return bad("cpr_k must be at least 2");
  if (!(o.cpr_k3_share >= 0 && o.cpr_k3_share <= 1)) return bad("cpr_k3_share must be in [0, 1]");
  if (!(o.beta >= 1)) return bad("beta must be at least 1");
  if (!(o.learning_rate > 0)) return bad("learning_rate must be positive");
  if (!(o.l2 >= 0)) return bad("l2 must not be negative");
  if (o.batch_size < 1) return bad("batch_size must be at least 1");
  if (!(o.replay_ratio >= 0)) return bad("replay_ratio must not be negative");
  if (!(o.idle_replay_passes >= 0)) return bad("idle_replay_passes must not be negative");
  if (o.threads < 1 || o.threads > 256) return bad("threads must be within [1, 256]");
  if (o.refit_epochs < 1 || o.refit_epochs > 10000) {
    return bad("refit_epochs must be within [1, 10000]");
  }
  if (!(o.refit_min_growth >= 0)) return bad("refit_min_growth must not be negative");
  if (o.tune && o.tune_betas.empty()) return bad("tune needs at least one of tune_betas");
  for (double b : o.tune_betas) {
    if (!(b >= 1 && b <= 100)) return bad("tune_betas must each be within [1, 100]");
  }
  if (!(o.refit_max_duty > 0 && o.refit_max_duty <= 1)) {
    return bad("refit_max_duty must be within (0, 1]");
  }
  if (!(o.holdout_fraction >= 0 && o.holdout_fraction <= 0.5)) {
    return bad("holdout_fraction must be within [0, 0.5]");
  }
  if (o.publish_every_events < 1) return bad("publish_every_events must be at least 1");
  if (!(o.publish_every_seconds > 0)) return bad("publish_interval must be positive");
  if (o.gate_k < 1) return bad("gate_k must be at least 1");
  if (!(o.gate_tolerance >= 0)) return bad("gate_tolerance must not be negative");
  if (!(o.gate_max_row_norm > 0)) return bad("gate_max_row_norm must be positive");
  return Status::Ok();
}

std::optional<int> ParseTrainConfig(int argc, const char* const* argv, TrainConfig* config) {
  CLI::App app(
      "plumb-train: the sidecar trainer. Ingests interaction events over gRPC into the "
      "store's event log, trains the embeddings online, and publishes gated versions.\n"
      "Every option is also a key of the --config TOML file (without the dashes, '-' -> "
      "'_'); flags win over the file.",
      "plumb-train");
  app.get_formatter()->column_width(44);
  std::vector<Key> keys;
  TrainConfig& c = *config;
  OnlineOptions& o = c.online;

  app.add_option("--config", c.config, "TOML configuration file")->check(CLI::ExistingFile);
  app.set_version_flag("--version", std::string("plumb-train ") + PLUMB_VERSION);

  const std::string s = "Store and transport";
  Bind(app, &keys, s, "db", &c.db, "Database directory (opened as the primary; required)");
  Bind(app, &keys, s, "listen", &c.listen, "gRPC address HOST:PORT (or unix:PATH)");
  Bind(app, &keys, s, "metrics", &c.metrics,
       "Prometheus /metrics and status page (/) address HOST:PORT; empty = off");
  Bind(app, &keys, s, "status_history_step", &c.status_history_step,
       "Spacing of the status page's history points; the last 1440 are kept (1s .. 1h)");
  Bind(app, &keys, s, "sync", &c.sync, "fsync the event log before acknowledging");
  Bind(app, &keys, s, "commit_window", &c.commit_window,
       "Group commit: wait this long for more events before a log write (0 = none; at most "
       "1s)");
  Bind(app, &keys, s, "max_group_events", &c.max_group_events, "Events per log write, at most");
  Bind(app, &keys, s, "max_batch_events", &c.max_batch_events, "PublishBatch size limit");
  Bind(app, &keys, s, "keep_versions", &c.keep_versions,
       "Newest embedding versions always kept for rollback");
  Bind(app, &keys, s, "keep_versions_for", &c.keep_versions_for,
       "Also keep every version younger than this (250ms, 90s, 30m, 24h, 7d; 0 = by count "
       "only); active and pinned versions are always kept");
  Bind(app, &keys, s, "dedup_window", &c.dedup_window,
       "event_id de-duplication window (250ms, 90s, 30m, 24h, 7d; 0 = forever)");
  Bind(app, &keys, s, "retention_max_age", &c.retention_max_age,
       "Remove events this much older than the newest event from the log once trained on; "
       "their pairs stay in the store's pair history (30m, 24h, 7d; 0 = no age rule)");
  Bind(app, &keys, s, "retention_max_log_mb", &c.retention_max_log_mb,
       "Remove the oldest trained-on events while the log holds more than this many MB "
       "(0 = no size rule)");
  Bind(app, &keys, s, "retention_interval", &c.retention_interval,
       "Pause between two retention passes (at least 100ms)");
  Bind(app, &keys, s, "max_future_skew", &c.max_future_skew,
       "Events whose timestamp is more than this after their receipt are rejected "
       "(REJECT_FUTURE_TIMESTAMP; 90s, 30m, 1h, 1d; 0 = no limit)");
  Bind(app, &keys, s, "background_nice", &c.background_nice,
       "CPU niceness of training, refits (10 more) and retention, so that serving on the "
       "same host keeps the CPU (0 = as the process, at most 19)");
  Bind(app, &keys, s, "min_free_disk_mb", &c.min_free_disk_mb,
       "Free space (MB) kept on the store's disk: writes that would cut into it are refused "
       "(RESOURCE_EXHAUSTED) until space is freed; 0 = no check");
  Bind(app, &keys, s, "token_file", &c.token_file,
       "File holding the bearer token every call must carry; empty = no token");
  Bind(app, &keys, s, "tls_cert", &c.tls_cert, "PEM certificate chain for TLS; empty = no TLS");
  Bind(app, &keys, s, "tls_key", &c.tls_key, "PEM private key for TLS");
  Bind(app, &keys, s, "allow_insecure_remote", &c.allow_insecure_remote,
       "Serve a non-loopback address without a token");
  Bind(app, &keys, s, "shutdown_grace", &c.shutdown_grace,
       "At SIGTERM/SIGINT, how long in-flight calls may finish (at most 10m)");
  Bind(app, &keys, s, "log_level", &c.log_level,
       "trace, debug, info, warn, error, critical or off");

  const std::string j = "Events from NATS JetStream (besides gRPC)";
  Bind(app, &keys, j, "jetstream_servers", &c.jetstream_servers,
       "NATS servers, comma-separated nats://HOST:PORT (tls://... for TLS); empty = off");
  Bind(app, &keys, j, "jetstream_stream", &c.jetstream_stream, "The stream to consume");
  Bind(app, &keys, j, "jetstream_subject", &c.jetstream_subject,
       "The consumer's filter subject (wildcards allowed)");
  Bind(app, &keys, j, "jetstream_consumer", &c.jetstream_consumer,
       "Durable pull consumer name (created when missing)");
  Bind(app, &keys, j, "jetstream_token_file", &c.jetstream_token_file,
       "File holding the token the NATS servers require; empty = none");
  Bind(app, &keys, j, "jetstream_credentials_file", &c.jetstream_credentials_file,
       "NATS credentials file (.creds: user JWT and seed); empty = none");
  Bind(app, &keys, j, "jetstream_tls_ca", &c.jetstream_tls_ca,
       "CA to trust: connect to NATS with TLS; empty = no TLS unless tls:// URLs");
  Bind(app, &keys, j, "jetstream_tls_cert", &c.jetstream_tls_cert,
       "PEM client certificate chain for NATS (when the servers verify clients)");
  Bind(app, &keys, j, "jetstream_tls_key", &c.jetstream_tls_key, "PEM key of jetstream_tls_cert");
  Bind(app, &keys, j, "jetstream_fetch_batch", &c.jetstream_fetch_batch,
       "Messages per pull from the consumer");
  Bind(app, &keys, j, "jetstream_max_message_bytes", &c.jetstream_max_message_bytes,
       "Larger messages are terminated (never redelivered) and counted");
  Bind(app, &keys, j, "jetstream_ack_wait", &c.jetstream_ack_wait,
       "The consumer's ack wait: an unacknowledged message is redelivered after this long");
  Bind(app, &keys, j, "jetstream_create_replicas", &c.jetstream_create_replicas,
       "Create the stream when missing, with this many replicas (0 = it must exist)");
  Bind(app, &keys, j, "jetstream_events", &c.jetstream_events,
       "Consume the event stream (--no-jetstream-events: the servers only take versions)");
  Bind(app, &keys, j, "jetstream_versions", &c.jetstream_versions,
       "Ship every activated version to the version stream and point the replicas at it");
  Bind(app, &keys, j, "jetstream_versions_stream", &c.jetstream_versions_stream,
       "The stream of versions (created when missing)");
  Bind(app, &keys, j, "jetstream_versions_subject", &c.jetstream_versions_subject,
       "Version N is published on <this>.N");
  Bind(app, &keys, j, "jetstream_pointer_bucket", &c.jetstream_pointer_bucket,
       "Key-value bucket whose key 'active' names the version replicas serve");
  Bind(app, &keys, j, "jetstream_keep_versions", &c.jetstream_keep_versions,
       "Versions kept in the version stream; older ones are purged (never the active one)");

  const std::string t = "Training";
  Bind(app, &keys, t, "objective", &o.objective, "cpr, bpr or bce");
  Bind(app, &keys, t, "dim", &o.dim, "Embedding dimension");
  Bind(app, &keys, t, "cpr_k", &o.cpr_k, "CPR sample size (pairs crossed per sample)");
  Bind(app, &keys, t, "cpr_k3_share", &o.cpr_k3_share, "Share of k=3 samples in CPR batches");
  Bind(app, &keys, t, "beta", &o.beta, "Dynamic sampling: candidates drawn per kept sample");
  Bind(app, &keys, t, "learning_rate", &o.learning_rate, "Learning rate");
  Bind(app, &keys, t, "l2", &o.l2, "L2 regularisation");
  Bind(app, &keys, t, "optimizer", &o.optimizer, "sgd or adagrad");
  Bind(app, &keys, t, "batch_size", &o.batch_size, "Samples per mini-batch");
  Bind(app, &keys, t, "idle_replay_passes", &o.idle_replay_passes,
       "Once caught up, passes of replay training over history (0 = none)");
  Bind(app, &keys, t, "replay_ratio", &o.replay_ratio,
       "Replayed history interactions per new interaction");
  Bind(app, &keys, t, "threads", &o.threads, "Threads of a background refit");
  Bind(app, &keys, t, "refit", &o.refit,
       "Refit the whole history in the background at a bounded cadence");
  Bind(app, &keys, t, "refit_epochs", &o.refit_epochs, "Epochs of a refit (as plumb fit --epochs)");
  Bind(app, &keys, t, "refit_min_growth", &o.refit_min_growth,
       "Refit once training pairs grew by this share since the last refit");
  Bind(app, &keys, t, "training_window", &c.training_window,
       "Train only on pairs whose latest event is this recent, measured back from the newest "
       "event (e.g. 30d; 0 = all history)");
  Bind(app, &keys, t, "tune", &o.tune,
       "Rebuilds choose beta from tune_betas on a debiased validation split");
  Bind(app, &keys, t, "tune_betas", &o.tune_betas,
       "Betas a rebuild chooses from (comma-separated)");
  Bind(app, &keys, t, "refit_max_duty", &o.refit_max_duty,
       "Share of time refits may run on average (a refit of T s waits T(1/duty-1) s)");
  Bind(app, &keys, t, "seed", &o.seed, "Random seed");
  Bind(app, &keys, t, "holdout_fraction", &o.holdout_fraction,
       "Share of (user, item) pairs held out for validation");
  Bind(app, &keys, t, "publish_every_events", &o.publish_every_events,
       "Publish a candidate after this many new events...");
  Bind(app, &keys, t, "publish_interval", &c.publish_interval,
       "...or after this long, whichever comes first");
  Bind(app, &keys, t, "min_train_pairs", &o.min_train_pairs,
       "No version before this many training pairs");
  Bind(app, &keys, t, "gate_k", &o.gate_k, "Gate: K of validation Recall@K");
  Bind(app, &keys, t, "gate_tolerance", &o.gate_tolerance,
       "Gate: allowed absolute drop of validation Recall@K");
  Bind(app, &keys, t, "gate_max_row_norm", &o.gate_max_row_norm, "Gate: largest row norm allowed");
  Bind(app, &keys, t, "auto_activate", &o.auto_activate,
       "Activate gate-passing candidates (initial value; kept in the store)");
  Bind(app, &keys, t, "require_gate", &o.require_gate,
       "Activate only candidates the gate compared and passed (not skipped ones)");

  try {
    app.parse(argc, argv);
  } catch (const CLI::ParseError& e) {
    // --help and --version exit 0; every other parse error is a usage error.
    return app.exit(e) == 0 ? 0 : 2;
  }

  if (!c.config.empty()) {
    toml::table table;
    try {
      table = toml::parse_file(c.config);
    } catch (const toml::parse_error& e) {
      std::fprintf(stderr, "plumb-train: %s line %u: %.*s\n", c.config.c_str(),
                   e.source().begin.line, static_cast<int>(e.description().size()),
                   e.description().data());
      return 2;
    }
    for (auto&& [name, node] : table) {
      const std::string key(name.str());
      const Key* found = nullptr;
      for (const Key& k : keys) {
        if (k.name == key) found = &k;
      }
      if (found == nullptr) {
        std::fprintf(stderr, "plumb-train: %s line %u: unknown key '%s' (see --help)\n",
                     c.config.c_str(), node.source().begin.line, key.c_str());
        return 2;
      }
      if (found->option->count() > 0) continue;  // the command line wins
      const std::string error = found->assign(node);
      if (!error.empty()) {
        std::fprintf(stderr, "plumb-train: %s line %u: %s %s\n", c.config.c_str(),
                     node.source().begin.line, key.c_str(), error.c_str());
        return 2;
      }
    }
  }

  if (Status s = ResolveDurations(&c); !s.ok()) {
    std::fprintf(stderr, "plumb-train: %s\n", s.message().c_str());
    return 2;
  }
  if (Status s = CheckTrainConfig(c); !s.ok()) {
    std::fprintf(stderr, "plumb-train: %s\n", s.message().c_str());
    return 2;
  }
  return std::nullopt;
}

}  // namespace plumb::online
