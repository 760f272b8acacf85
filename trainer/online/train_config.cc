#include "trainer/online/train_config.h"

#include <CLI/CLI.hpp>
#include <cstdio>
#include <limits>
#include <type_traits>
#include <variant>
#include <vector>

#include "config/flag_file.h"

namespace plumb::online {
namespace {

// One configuration key of plumb-train: a row of the table in ParseTrainConfig.
using Field =
    std::variant<std::string*, bool*, int*, uint32_t*, uint64_t*, double*, std::vector<double>*>;
struct KeyRow {
  const char* key;
  Field field;
  const char* help;
};
struct KeyGroup {
  std::string name;
  std::vector<KeyRow> rows;
};

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
    return ParseDurationIn(key, text, 0, std::numeric_limits<int64_t>::max(), &ms);
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
  if (!c.jetstream_nats.servers.empty()) {
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
    if (c.jetstream_nats.tls_cert.empty() != c.jetstream_nats.tls_key.empty()) {
      return bad("jetstream_tls_cert and jetstream_tls_key go together");
    }
    if (Status s = ParseDuration(c.jetstream_ack_wait, &ms); !s.ok() || ms < 1000) {
      return bad("jetstream_ack_wait must be a duration of at least 1s");
    }
  }
  if (c.jetstream_versions) {
    if (c.jetstream_nats.servers.empty()) return bad("jetstream_versions needs jetstream_servers");
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
  config::FlagFile keys(&app);
  TrainConfig& c = *config;
  OnlineOptions& o = c.online;

  app.add_option("--config", c.config, "TOML configuration file")->check(CLI::ExistingFile);
  app.set_version_flag("--version", std::string("plumb-train ") + PLUMB_VERSION);

  // Every key: its group in --help, its field, its help text.
  const std::vector<KeyGroup> groups = {
      {"Store and transport",
       {
           {"db", &c.db, "Database directory (opened as the primary; required)"},
           {"listen", &c.listen, "gRPC address HOST:PORT (or unix:PATH)"},
           {"metrics", &c.metrics,
            "Prometheus /metrics and status page (/) address HOST:PORT; empty = off"},
           {"status_history_step", &c.status_history_step,
            "Spacing of the status page's history points; the last 1440 are kept (1s .. 1h)"},
           {"sync", &c.sync, "fsync the event log before acknowledging"},
           {"commit_window", &c.commit_window,
            "Group commit: wait this long for more events before a log write (0 = none; at most "
            "1s)"},
           {"max_group_events", &c.max_group_events, "Events per log write, at most"},
           {"max_batch_events", &c.max_batch_events, "PublishBatch size limit"},
           {"keep_versions", &c.keep_versions,
            "Newest embedding versions always kept for rollback"},
           {"keep_versions_for", &c.keep_versions_for,
            "Also keep every version younger than this (250ms, 90s, 30m, 24h, 7d; 0 = by count "
            "only); active and pinned versions are always kept"},
           {"dedup_window", &c.dedup_window,
            "event_id de-duplication window (250ms, 90s, 30m, 24h, 7d; 0 = forever)"},
           {"retention_max_age", &c.retention_max_age,
            "Remove events this much older than the newest event from the log once trained on; "
            "their pairs stay in the store's pair history (30m, 24h, 7d; 0 = no age rule)"},
           {"retention_max_log_mb", &c.retention_max_log_mb,
            "Remove the oldest trained-on events while the log holds more than this many MB "
            "(0 = no size rule)"},
           {"retention_interval", &c.retention_interval,
            "Pause between two retention passes (at least 100ms)"},
           {"max_future_skew", &c.max_future_skew,
            "Events whose timestamp is more than this after their receipt are rejected "
            "(REJECT_FUTURE_TIMESTAMP; 90s, 30m, 1h, 1d; 0 = no limit)"},
           {"background_nice", &c.background_nice,
            "CPU niceness of training, refits (10 more) and retention, so that serving on the "
            "same host keeps the CPU (0 = as the process, at most 19)"},
           {"min_free_disk_mb", &c.min_free_disk_mb,
            "Free space (MB) kept on the store's disk: writes that would cut into it are refused "
            "(RESOURCE_EXHAUSTED) until space is freed; 0 = no check"},
           {"token_file", &c.token_file,
            "File holding the bearer token every call must carry; empty = no token"},
           {"tls_cert", &c.tls_cert, "PEM certificate chain for TLS; empty = no TLS"},
           {"tls_key", &c.tls_key, "PEM private key for TLS"},
           {"allow_insecure_remote", &c.allow_insecure_remote,
            "Serve a non-loopback address without a token"},
           {"shutdown_grace", &c.shutdown_grace,
            "At SIGTERM/SIGINT, how long in-flight calls may finish (at most 10m)"},
           {"log_level", &c.log_level, "trace, debug, info, warn, error, critical or off"},
       }},
      {"Events from NATS JetStream (besides gRPC)",
       {
           {"jetstream_servers", &c.jetstream_nats.servers,
            "NATS servers, comma-separated nats://HOST:PORT (tls://... for TLS); empty = off"},
           {"jetstream_stream", &c.jetstream_stream, "The stream to consume"},
           {"jetstream_subject", &c.jetstream_subject,
            "The consumer's filter subject (wildcards allowed)"},
           {"jetstream_consumer", &c.jetstream_consumer,
            "Durable pull consumer name (created when missing)"},
           {"jetstream_token_file", &c.jetstream_nats.token_file,
            "File holding the token the NATS servers require; empty = none"},
           {"jetstream_credentials_file", &c.jetstream_nats.credentials_file,
            "NATS credentials file (.creds: user JWT and seed); empty = none"},
           {"jetstream_tls_ca", &c.jetstream_nats.tls_ca,
            "CA to trust: connect to NATS with TLS; empty = no TLS unless tls:// URLs"},
           {"jetstream_tls_cert", &c.jetstream_nats.tls_cert,
            "PEM client certificate chain for NATS (when the servers verify clients)"},
           {"jetstream_tls_key", &c.jetstream_nats.tls_key, "PEM key of jetstream_tls_cert"},
           {"jetstream_fetch_batch", &c.jetstream_fetch_batch,
            "Messages per pull from the consumer"},
           {"jetstream_max_message_bytes", &c.jetstream_max_message_bytes,
            "Larger messages are terminated (never redelivered) and counted"},
           {"jetstream_ack_wait", &c.jetstream_ack_wait,
            "The consumer's ack wait: an unacknowledged message is redelivered after this long"},
           {"jetstream_create_replicas", &c.jetstream_create_replicas,
            "Create the stream when missing, with this many replicas (0 = it must exist)"},
           {"jetstream_events", &c.jetstream_events,
            "Consume the event stream (--no-jetstream-events: the servers only take versions)"},
           {"jetstream_versions", &c.jetstream_versions,
            "Ship every activated version to the version stream and point the replicas at it"},
           {"jetstream_versions_stream", &c.jetstream_versions_stream,
            "The stream of versions (created when missing)"},
           {"jetstream_versions_subject", &c.jetstream_versions_subject,
            "Version N is published on <this>.N"},
           {"jetstream_pointer_bucket", &c.jetstream_pointer_bucket,
            "Key-value bucket whose key 'active' names the version replicas serve"},
           {"jetstream_keep_versions", &c.jetstream_keep_versions,
            "Versions kept in the version stream; older ones are purged (never the active one)"},
       }},
      {"Training",
       {
           {"objective", &o.objective, "cpr, bpr or bce"},
           {"dim", &o.dim, "Embedding dimension"},
           {"cpr_k", &o.cpr_k, "CPR sample size (pairs crossed per sample)"},
           {"cpr_k3_share", &o.cpr_k3_share, "Share of k=3 samples in CPR batches"},
           {"beta", &o.beta, "Dynamic sampling: candidates drawn per kept sample"},
           {"learning_rate", &o.learning_rate, "Learning rate"},
           {"l2", &o.l2, "L2 regularisation"},
           {"optimizer", &o.optimizer, "sgd or adagrad"},
           {"batch_size", &o.batch_size, "Samples per mini-batch"},
           {"idle_replay_passes", &o.idle_replay_passes,
            "Once caught up, passes of replay training over history (0 = none)"},
           {"replay_ratio", &o.replay_ratio, "Replayed history interactions per new interaction"},
           {"threads", &o.threads, "Threads of a background refit"},
           {"refit", &o.refit, "Refit the whole history in the background at a bounded cadence"},
           {"refit_epochs", &o.refit_epochs, "Epochs of a refit (as plumb fit --epochs)"},
           {"refit_min_growth", &o.refit_min_growth,
            "Refit once training pairs grew by this share since the last refit"},
           {"training_window", &c.training_window,
            "Train only on pairs whose latest event is this recent, measured back from the newest "
            "event (e.g. 30d; 0 = all history)"},
           {"tune", &o.tune, "Rebuilds choose beta from tune_betas on a debiased validation split"},
           {"tune_betas", &o.tune_betas, "Betas a rebuild chooses from (comma-separated)"},
           {"refit_max_duty", &o.refit_max_duty,
            "Share of time refits may run on average (a refit of T s waits T(1/duty-1) s)"},
           {"seed", &o.seed, "Random seed"},
           {"holdout_fraction", &o.holdout_fraction,
            "Share of (user, item) pairs held out for validation"},
           {"publish_every_events", &o.publish_every_events,
            "Publish a candidate after this many new events..."},
           {"publish_interval", &c.publish_interval,
            "...or after this long, whichever comes first"},
           {"min_train_pairs", &o.min_train_pairs, "No version before this many training pairs"},
           {"gate_k", &o.gate_k, "Gate: K of validation Recall@K"},
           {"gate_tolerance", &o.gate_tolerance,
            "Gate: allowed absolute drop of validation Recall@K"},
           {"gate_max_row_norm", &o.gate_max_row_norm, "Gate: largest row norm allowed"},
           {"auto_activate", &o.auto_activate,
            "Activate gate-passing candidates (initial value; kept in the store)"},
           {"require_gate", &o.require_gate,
            "Activate only candidates the gate compared and passed (not skipped ones)"},
       }},
  };
  for (const KeyGroup& group : groups) {
    for (const KeyRow& row : group.rows) {
      std::visit(
          [&](auto* field) {
            std::string help = row.help;
            if constexpr (std::is_same_v<decltype(field), bool*>) {
              help += std::string(" [default: ") + (*field ? "on" : "off") + "]";
            }
            keys.Add(row.key, field, help)->group(group.name);
          },
          row.field);
    }
  }

  try {
    app.parse(argc, argv);
  } catch (const CLI::ParseError& e) {
    // --help and --version exit 0; every other parse error is a usage error.
    return app.exit(e) == 0 ? 0 : 2;
  }

  if (!c.config.empty()) {
    if (Status s = keys.Apply(c.config); !s.ok()) {
      std::fprintf(stderr, "plumb-train: %s\n", s.message().c_str());
      return 2;
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
