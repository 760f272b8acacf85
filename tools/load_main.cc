// plumb-load: measures plumb-serve as a client sees it, and feeds plumb-train.
//
//   plumb-load [--rpc recommend|similar|health] [--concurrency N | --rate R] ...
//       asynchronous calls for a while, then requests/s, errors by status and latency
//       percentiles (text, or JSON with --json); optionally publishes events to the
//       trainer at the same time (--publish-rate).
//   plumb-load replay --events FILE.csv [--rate E] [--events-per-call N] [--stream]
//       streams a history file through EventIngest in file order.
// Flag names follow the vocabulary in DEVELOPERS.md (--server / --trainer, durations with a
// unit).
//
// Exit status: 0 done; 1 the run or replay could not be done (reason on stderr); 2 usage;
// 3 replay finished but the trainer rejected some events (listed on stderr).
#include <CLI/CLI.hpp>
#include <chrono>
#include <fstream>
#include <iostream>
#include <thread>

#include "core/duration.h"
#include "tools/client_channel.h"
#include "tools/event_publisher.h"
#include "tools/event_replay.h"
#include "tools/id_source.h"
#include "tools/load_generator.h"
#include "tools/load_report.h"

namespace {

using namespace plumb::tools;
using plumb::ParseDurationIn;
using plumb::Status;

struct LoadArgs {
  ChannelSpec serve{"127.0.0.1:7400", "", ""};
  ChannelSpec train{"127.0.0.1:7601", "", ""};
  std::string rpc = "recommend";
  uint32_t channels = 1;
  std::string users_file, items_file, db;
  std::string token_file;          // sent to --server (plumb-serve)
  std::string trainer_token_file;  // sent to --trainer (plumb-train)
  bool json = false;
  double publish_rate = 0;
  uint32_t publish_batch = 100;
  bool event_ids = false;
  std::string connect_timeout = "10s", duration = "10s", warmup = "1s", deadline = "1s";
  int64_t connect_timeout_ms = 10'000;
  bool include_seen = false;
  LoadOptions load;
};

int Fail(const std::string& message) {
  std::cerr << "plumb-load: " << message << "\n";
  return 1;
}

// A flag's value that parsed but cannot be used (e.g. a duration without a unit): exit 2.
int Usage(const std::string& message) {
  std::cerr << "plumb-load: " << message << " (see --help)\n";
  return 2;
}

Status LoadIds(const LoadArgs& a, bool need_users, bool need_items, std::vector<std::string>* users,
               std::vector<std::string>* items) {
  const bool users_from_db = need_users && a.users_file.empty();
  const bool items_from_db = need_items && a.items_file.empty();
  if ((users_from_db || items_from_db) && a.db.empty()) {
    return Status::InvalidArgument(std::string("this run needs ") +
                                   (users_from_db && items_from_db ? "user and item ids"
                                    : users_from_db                ? "user ids"
                                                                   : "item ids") +
                                   ": give " + (users_from_db ? "--users-file" : "--items-file") +
                                   " or --db");
  }
  if (users_from_db || items_from_db) {
    PLUMB_RETURN_IF_ERROR(
        ReadActiveIds(a.db, users_from_db ? users : nullptr, items_from_db ? items : nullptr));
  }
  if (need_users && !a.users_file.empty()) PLUMB_RETURN_IF_ERROR(ReadIdFile(a.users_file, users));
  if (need_items && !a.items_file.empty()) PLUMB_RETURN_IF_ERROR(ReadIdFile(a.items_file, items));
  if (need_users && users->empty())
    return Status::FailedPrecondition("the active version knows no users");
  if (need_items && items->empty())
    return Status::FailedPrecondition("the active version knows no items");
  return Status::Ok();
}

bool Reachable(const std::shared_ptr<grpc::Channel>& channel, int64_t ms) {
  return channel->WaitForConnected(std::chrono::system_clock::now() +
                                   std::chrono::milliseconds(ms));
}

int RunLoad(LoadArgs& a) {
  LoadOptions& o = a.load;
  o.exclude_seen = !a.include_seen;
  int64_t ms = 0;
  if (Status s = ParseDurationIn("--duration", a.duration, 1, 86'400'000, &ms); !s.ok())
    return Usage(s.message());
  o.duration_seconds = static_cast<double>(ms) / 1000.0;
  if (Status s = ParseDurationIn("--warmup", a.warmup, 0, 3'600'000, &ms); !s.ok())
    return Usage(s.message());
  o.warmup_seconds = static_cast<double>(ms) / 1000.0;
  if (Status s = ParseDurationIn("--deadline", a.deadline, 1, 3'600'000, &ms); !s.ok())
    return Usage(s.message());
  o.deadline_ms = static_cast<int>(ms);
  if (Status s = ParseDurationIn("--connect-timeout", a.connect_timeout, 100, 3'600'000,
                                 &a.connect_timeout_ms);
      !s.ok())
    return Usage(s.message());
  o.rpc = a.rpc == "similar"  ? LoadRpc::kSimilar
          : a.rpc == "health" ? LoadRpc::kHealth
                              : LoadRpc::kRecommend;
  const bool publish = a.publish_rate > 0;
  if (!a.token_file.empty()) {
    if (Status s = ReadBearerToken(a.token_file, &o.bearer_token); !s.ok())
      return Fail(s.message());
  }
  std::vector<std::string> users, items;
  if (Status s = LoadIds(a, o.rpc == LoadRpc::kRecommend || publish,
                         o.rpc == LoadRpc::kSimilar || publish, &users, &items);
      !s.ok()) {
    return Fail(s.message());
  }

  std::vector<std::shared_ptr<grpc::Channel>> channels;
  for (uint32_t i = 0; i < a.channels; ++i) {
    std::shared_ptr<grpc::Channel> channel;
    if (Status s = MakeChannel(a.serve, &channel); !s.ok()) return Fail(s.message());
    if (!Reachable(channel, a.connect_timeout_ms)) {
      return Fail("cannot reach plumb-serve at " + a.serve.target + " within " + a.connect_timeout);
    }
    channels.push_back(std::move(channel));
  }

  LoadReport report;
  report.target = a.serve.target;
  report.options = o;
  std::thread publisher_thread;
  Status publish_status;
  if (publish) {
    PublishOptions& po = report.publish_options;
    po.events_per_second = a.publish_rate;
    po.batch = a.publish_batch;
    po.zipf_s = o.zipf_s;
    po.seed = o.seed + 1;
    po.event_ids = a.event_ids;
    if (!a.trainer_token_file.empty()) {
      if (Status s = ReadBearerToken(a.trainer_token_file, &po.bearer_token); !s.ok())
        return Fail(s.message());
    }
    std::shared_ptr<grpc::Channel> channel;
    if (Status s = MakeChannel(a.train, &channel); !s.ok()) return Fail(s.message());
    if (!Reachable(channel, a.connect_timeout_ms)) {
      return Fail("cannot reach plumb-train at " + a.train.target + " within " + a.connect_timeout);
    }
    report.published = true;
    report.ingest_target = a.train.target;
    const auto begin = LoadClock::now();
    const auto end =
        begin + std::chrono::duration_cast<LoadClock::duration>(
                    std::chrono::duration<double>(o.warmup_seconds + o.duration_seconds));
    publisher_thread = std::thread([&, channel, begin, end] {
      EventPublisher publisher(channel, &users, &items, po);
      publish_status = publisher.Run(begin, end, &report.publish);
    });
  }

  LoadGenerator generator(channels, o.rpc == LoadRpc::kSimilar ? &items : &users, o);
  Status s = generator.Run(&report.result);
  if (publisher_thread.joinable()) publisher_thread.join();
  if (!s.ok()) return Fail(s.message());
  if (!publish_status.ok()) return Fail(publish_status.message());

  if (a.json) {
    std::cout << LoadReportJson(report);
  } else {
    PrintLoadReport(report, std::cout);
  }
  return 0;
}

struct ReplayArgs {
  ChannelSpec train{"127.0.0.1:7601", "", ""};
  std::string token_file;
  bool quiet = false;
  std::string connect_timeout = "30s", deadline = "30s";
  ReplayOptions replay;
};

int RunReplay(ReplayArgs& a) {
  ReplayOptions& o = a.replay;
  int64_t ms = 0;
  if (Status s = ParseDurationIn("--connect-timeout", a.connect_timeout, 100, 3'600'000, &ms);
      !s.ok())
    return Usage(s.message());
  o.connect_timeout_ms = static_cast<int>(ms);
  if (Status s = ParseDurationIn("--deadline", a.deadline, 1, 3'600'000, &ms); !s.ok())
    return Usage(s.message());
  o.deadline_ms = static_cast<int>(ms);
  if (!a.token_file.empty()) {
    if (Status s = ReadBearerToken(a.token_file, &o.bearer_token); !s.ok())
      return Fail(s.message());
  }
  std::shared_ptr<grpc::Channel> channel;
  if (Status s = MakeChannel(a.train, &channel); !s.ok()) return Fail(s.message());
  ReplaySummary summary;
  Status s = ReplayEvents(channel, o, a.quiet ? nullptr : &std::cerr, &summary);
  for (const std::string& w : summary.warnings) std::cerr << "plumb-load: warning: " << w << "\n";
  for (const std::string& r : summary.rejections) std::cerr << "rejected: " << r << "\n";
  if (!s.ok()) {
    return Fail(s.message() + (s.code() == Status::Code::kUnavailable && summary.sent == 0
                                   ? " (is plumb-train listening on " + a.train.target + "?)"
                                   : ""));
  }
  char line[512];
  std::snprintf(line, sizeof line,
                "replayed %llu events from %s to %s in %.2f s (%.0f events/s): %llu accepted, "
                "%llu duplicates, %llu rejected; %llu calls, %llu retried; log at sequence %llu; "
                "generated event ids start with \"%s:\"\n",
                static_cast<unsigned long long>(summary.sent), o.events_file.c_str(),
                a.train.target.c_str(), summary.seconds,
                summary.seconds > 0 ? static_cast<double>(summary.sent) / summary.seconds : 0.0,
                static_cast<unsigned long long>(summary.accepted),
                static_cast<unsigned long long>(summary.duplicates),
                static_cast<unsigned long long>(summary.rejected),
                static_cast<unsigned long long>(summary.calls),
                static_cast<unsigned long long>(summary.retried),
                static_cast<unsigned long long>(summary.last_sequence), summary.id_prefix.c_str());
  std::cout << line;
  return summary.rejected > 0 ? 3 : 0;
}

CLI::Option* AddTlsOptions(CLI::App* app, ChannelSpec* spec, const std::string& flag,
                           const std::string& what) {
  return app->add_option(flag, spec->tls_ca_file, "PEM CA bundle to trust: use TLS to " + what)
      ->check(CLI::ExistingFile);
}

}  // namespace

int main(int argc, char** argv) {
  CLI::App app(
      "plumb-load: measures plumb-serve as a client sees it (requests/s, errors by status, "
      "latency percentiles) with asynchronous gRPC calls, optionally while publishing events "
      "to plumb-train; 'plumb-load replay' streams a history file into plumb-train.\n"
      "Exit status: 0 done, 1 failed (reason on stderr), 2 usage error, 3 replay with "
      "rejected events.",
      "plumb-load");
  app.option_defaults()->always_capture_default();
  app.get_formatter()->column_width(36);
  app.set_version_flag("--version", std::string("plumb-load ") + PLUMB_VERSION);

  LoadArgs a;
  LoadOptions& o = a.load;
  const std::string q = "Queries";
  app.add_option("--server", a.serve.target, "plumb-serve address HOST:PORT")->group(q);
  app.add_option("--rpc", a.rpc,
                 "recommend, similar (SimilarItems) or health (the empty-RPC floor)")
      ->check(CLI::IsMember({"recommend", "similar", "health"}))
      ->group(q);
  app.add_option("--concurrency", o.concurrency, "Closed loop: calls kept in flight")
      ->check(CLI::Range(1u, 100000u))
      ->group(q);
  app.add_option("--rate", o.rate, "Open loop: calls started per second (0: closed loop)")
      ->check(CLI::Range(0.0, 1e7))
      ->group(q);
  app.add_option("--duration", a.duration, "How long to measure (1ms .. 1d)")->group(q);
  app.add_option("--warmup", a.warmup, "How long to call before measuring (0 .. 1h)")->group(q);
  app.add_option("--rpc-threads", o.threads,
                 "Completion-queue threads (open loop: each with its own dispatcher thread)")
      ->check(CLI::Range(1u, 64u))
      ->group(q);
  app.add_option("--channels", a.channels, "gRPC connections to the server (calls alternate)")
      ->check(CLI::Range(1u, 64u))
      ->group(q);
  app.add_option("--count", o.count, "Items per answer (Recommend, SimilarItems)")
      ->check(CLI::Range(1u, 1000000u))
      ->group(q);
  app.add_flag("--include-seen", a.include_seen,
               "Recommend: also return items the user already had (default: left out)")
      ->group(q);
  app.add_option("--deadline", a.deadline, "Deadline of each call (1ms .. 1h)")->group(q);
  app.add_option("--max-outstanding", o.max_outstanding,
                 "Open loop: calls in flight at most; later ones wait (latency counts from "
                 "their scheduled start)")
      ->check(CLI::Range(1u, 10000000u))
      ->group(q);
  app.add_option("--health-service", o.health_service,
                 "--rpc health: service name to ask about ('' = server)")
      ->group(q);
  app.add_option("--max-samples", o.max_samples,
                 "Latencies kept for exact percentiles; beyond, a uniform sample")
      ->check(CLI::Range(size_t{1000}, size_t{1} << 30))
      ->group(q);
  app.add_option("--connect-timeout", a.connect_timeout,
                 "How long to wait for the servers to be reachable (100ms .. 1h)")
      ->group(q);
  AddTlsOptions(&app, &a.serve, "--tls-ca", "plumb-serve")->group(q);
  app.add_option("--token-file", a.token_file,
                 "File with plumb-serve's bearer token (if it requires one)")
      ->check(CLI::ExistingFile)
      ->group(q);
  app.add_option("--tls-server-name", a.serve.tls_server_name,
                 "Name to expect in plumb-serve's certificate instead of the host")
      ->group(q);
  app.add_flag("--json", a.json, "Print the report as JSON instead of text");

  const std::string ids = "Who is asked about";
  app.add_option("--users-file", a.users_file, "User ids, one per line")
      ->check(CLI::ExistingFile)
      ->group(ids);
  app.add_option("--items-file", a.items_file, "Item ids, one per line (first CSV column)")
      ->check(CLI::ExistingFile)
      ->group(ids);
  app.add_option("--db", a.db,
                 "Store directory: take the users and items its active version knows (opened "
                 "read-only as a secondary)")
      ->group(ids);
  app.add_option("--zipf", o.zipf_s,
                 "Skew s: the r-th most frequent id is drawn with weight 1/r^s (0: uniform)")
      ->check(CLI::Range(0.0, 10.0))
      ->group(ids);
  app.add_option("--seed", o.seed, "Seed of the id permutation and the draws")->group(ids);

  const std::string pub = "Events published meanwhile";
  app.add_option("--publish-rate", a.publish_rate, "Events per second to plumb-train (0: none)")
      ->check(CLI::Range(0.0, 1e7))
      ->group(pub);
  app.add_option("--publish-events-per-call", a.publish_batch, "Events per PublishBatch call")
      ->check(CLI::Range(1u, 100000u))
      ->group(pub);
  app.add_flag("--event-ids", a.event_ids, "Give published events unique event ids")->group(pub);
  app.add_option("--trainer", a.train.target, "plumb-train address HOST:PORT")->group(pub);
  app.add_option("--trainer-token-file", a.trainer_token_file,
                 "File with plumb-train's bearer token")
      ->check(CLI::ExistingFile)
      ->group(pub);
  AddTlsOptions(&app, &a.train, "--trainer-tls-ca", "plumb-train")->group(pub);
  app.add_option("--trainer-tls-server-name", a.train.tls_server_name,
                 "Name to expect in plumb-train's certificate instead of the host")
      ->group(pub);

  ReplayArgs r;
  CLI::App* replay = app.add_subcommand(
      "replay",
      "Stream a history file (user,item[,ts][,weight][,event_id] with a header, as for "
      "'plumb fit') into plumb-train's EventIngest in file order. The whole file is checked "
      "first; a malformed file sends nothing. Events without event_id get '<prefix>:<line>' "
      "so that replaying the same file again is recognised as duplicates. Progress on stderr, "
      "summary on stdout.");
  replay->option_defaults()->always_capture_default();
  replay->add_option("--events", r.replay.events_file, "The CSV file")
      ->required()
      ->check(CLI::ExistingFile);
  replay->add_option("--trainer", r.train.target, "plumb-train address HOST:PORT");
  replay
      ->add_option("--rate", r.replay.events_per_second,
                   "Events per second (0: as fast as acknowledged)")
      ->check(CLI::Range(0.0, 1e8));
  replay
      ->add_option("--events-per-call", r.replay.batch,
                   "Events per call (PublishBatch) or per stream (--stream)")
      ->check(CLI::Range(1u, 100000u));
  replay->add_flag("--stream", r.replay.stream, "Use the client-streaming Publish call");
  replay->add_option("--id-prefix", r.replay.id_prefix,
                     "Prefix of generated event ids (default: 'f' + a hash of the file)");
  replay
      ->add_option("--retries", r.replay.retries,
                   "Resends of a call that failed with UNAVAILABLE, RESOURCE_EXHAUSTED, "
                   "DEADLINE_EXCEEDED or ABORTED")
      ->check(CLI::Range(0u, 1000u));
  replay->add_option("--deadline", r.deadline, "Deadline of each call (1ms .. 1h)");
  replay->add_option("--connect-timeout", r.connect_timeout,
                     "How long to wait for plumb-train to be reachable (100ms .. 1h)");
  replay->add_option("--token-file", r.token_file, "File with plumb-train's bearer token")
      ->check(CLI::ExistingFile);
  AddTlsOptions(replay, &r.train, "--tls-ca", "plumb-train");
  replay->add_option("--tls-server-name", r.train.tls_server_name,
                     "Name to expect in the trainer's certificate instead of the host");
  replay->add_flag("--quiet", r.quiet, "No progress lines");

  try {
    app.parse(argc, argv);
  } catch (const CLI::ParseError& e) {
    if (e.get_exit_code() == 0) return app.exit(e);  // --help, --version
    std::cerr << "plumb-load: " << e.what() << " (see --help)\n";
    return 2;
  }
  if (*replay) return RunReplay(r);
  return RunLoad(a);
}
