// plumb-query: one call to a running plumb process, answer printed for people.
//
//   plumb-serve (Ranker, health):  recommend, similar, rank, health
//   plumb-train (ModelControl):    versions, status, activate, auto-activate
//
// Exit status: 0 success (health: only when SERVING); 1 the call failed, with one line
// "plumb-query: <STATUS_CODE>: <message>" on stderr; 2 usage error.
#include <grpcpp/client_context.h>

#include <CLI/CLI.hpp>
#include <cmath>
#include <cstdio>
#include <ctime>
#include <iostream>
#include <memory>
#include <sstream>

#include "grpc/health/v1/health.grpc.pb.h"
#include "plumb/v1/control.grpc.pb.h"
#include "plumb/v1/ranker.grpc.pb.h"
#include "tools/client_channel.h"
#include "tools/item_names.h"

namespace {

using namespace plumb::tools;
using plumb::Status;

struct Connection {
  explicit Connection(std::string target) { spec.target = std::move(target); }
  ChannelSpec spec;
  int timeout_ms = 5000;
  std::string token_file;
};

int Fail(const std::string& message) {
  std::cerr << "plumb-query: " << message << "\n";
  return 1;
}

int Fail(const grpc::Status& status) { return Fail(DescribeStatus(status)); }

// Opens the channel and prepares a context with the deadline (and token, if any).
Status Prepare(const Connection& c, std::shared_ptr<grpc::Channel>* channel,
               grpc::ClientContext* context) {
  PLUMB_RETURN_IF_ERROR(MakeChannel(c.spec, channel));
  context->set_deadline(std::chrono::system_clock::now() + std::chrono::milliseconds(c.timeout_ms));
  if (!c.token_file.empty()) {
    std::string token;
    PLUMB_RETURN_IF_ERROR(ReadBearerToken(c.token_file, &token));
    AttachBearerToken(token, context);
  }
  return Status::Ok();
}

// ---- ranker ----------------------------------------------------------------------------

struct ListArgs {
  Connection conn{"127.0.0.1:7400"};
  std::string id;  // user or item
  uint32_t count = 10;
  bool exclude_seen = false;
  std::vector<std::string> recent, exclude, candidates;
  std::string names_file;
  bool fallback = false;
};

// Prints the ranked list: rank, item, score and, with names, the item's name.
int PrintItems(const google::protobuf::RepeatedPtrField<plumb::v1::ScoredItem>& items,
               const std::string& names_file) {
  ItemNames names;
  if (!names_file.empty()) {
    if (Status s = ItemNames::Read(names_file, &names); !s.ok()) return Fail(s.message());
  }
  size_t width = 4;
  for (const auto& item : items) width = std::max(width, item.item_id().size());
  std::printf("%4s  %-*s  %10s%s\n", "rank", static_cast<int>(width), "item", "score",
              names_file.empty() ? "" : "  name");
  int rank = 0;
  for (const auto& item : items) {
    std::printf("%4d  %-*s  %10.6f", ++rank, static_cast<int>(width), item.item_id().c_str(),
                static_cast<double>(item.score()));
    if (!names_file.empty()) std::printf("  %s", names.Find(item.item_id()).c_str());
    std::printf("\n");
  }
  return 0;
}

int Recommend(const ListArgs& a) {
  std::shared_ptr<grpc::Channel> channel;
  grpc::ClientContext context;
  if (Status s = Prepare(a.conn, &channel, &context); !s.ok()) return Fail(s.message());
  plumb::v1::RecommendRequest request;
  request.set_user_id(a.id);
  request.set_count(a.count);
  request.set_exclude_seen(a.exclude_seen);
  for (const auto& item : a.recent) request.add_recent_item_ids(item);
  for (const auto& item : a.exclude) request.add_exclude_item_ids(item);
  if (a.fallback) request.set_unknown_user(plumb::v1::UNKNOWN_USER_MOST_INTERACTED);
  plumb::v1::RecommendResponse response;
  const grpc::Status status =
      plumb::v1::Ranker::NewStub(channel)->Recommend(&context, request, &response);
  if (!status.ok()) return Fail(status);
  std::printf("model version %llu, user %s, %d items%s\n",
              static_cast<unsigned long long>(response.model_version()), a.id.c_str(),
              response.items_size(),
              response.fallback()    ? " (unknown user: most-interacted fallback, not personal)"
              : response.folded_in() ? " (unknown user: folded in from the recent items)"
                                     : "");
  return PrintItems(response.items(), a.names_file);
}

int Similar(const ListArgs& a) {
  std::shared_ptr<grpc::Channel> channel;
  grpc::ClientContext context;
  if (Status s = Prepare(a.conn, &channel, &context); !s.ok()) return Fail(s.message());
  plumb::v1::SimilarItemsRequest request;
  request.set_item_id(a.id);
  request.set_count(a.count);
  for (const auto& item : a.exclude) request.add_exclude_item_ids(item);
  plumb::v1::SimilarItemsResponse response;
  const grpc::Status status =
      plumb::v1::Ranker::NewStub(channel)->SimilarItems(&context, request, &response);
  if (!status.ok()) return Fail(status);
  std::printf("model version %llu, items like %s (cosine), %d items\n",
              static_cast<unsigned long long>(response.model_version()), a.id.c_str(),
              response.items_size());
  return PrintItems(response.items(), a.names_file);
}

int Rank(const ListArgs& a) {
  std::shared_ptr<grpc::Channel> channel;
  grpc::ClientContext context;
  if (Status s = Prepare(a.conn, &channel, &context); !s.ok()) return Fail(s.message());
  plumb::v1::RankCandidatesRequest request;
  request.set_user_id(a.id);
  for (const auto& item : a.candidates) request.add_candidate_item_ids(item);
  for (const auto& item : a.recent) request.add_recent_item_ids(item);
  plumb::v1::RankCandidatesResponse response;
  const grpc::Status status =
      plumb::v1::Ranker::NewStub(channel)->RankCandidates(&context, request, &response);
  if (!status.ok()) return Fail(status);
  std::printf("model version %llu, user %s, %d of %zu candidates ranked%s\n",
              static_cast<unsigned long long>(response.model_version()), a.id.c_str(),
              response.items_size(), a.candidates.size(),
              response.folded_in() ? " (unknown user: folded in from the recent items)" : "");
  const int rc = PrintItems(response.items(), a.names_file);
  if (rc == 0 && response.unknown_item_ids_size() > 0) {
    std::string unknown;
    for (const auto& id : response.unknown_item_ids()) unknown += (unknown.empty() ? "" : ",") + id;
    std::printf("not known to this version: %s\n", unknown.c_str());
  }
  return rc;
}

int Health(const Connection& c, const std::string& service) {
  std::shared_ptr<grpc::Channel> channel;
  grpc::ClientContext context;
  if (Status s = Prepare(c, &channel, &context); !s.ok()) return Fail(s.message());
  grpc::health::v1::HealthCheckRequest request;
  request.set_service(service);
  grpc::health::v1::HealthCheckResponse response;
  const grpc::Status status =
      grpc::health::v1::Health::NewStub(channel)->Check(&context, request, &response);
  if (!status.ok()) return Fail(status);
  const std::string name =
      grpc::health::v1::HealthCheckResponse::ServingStatus_Name(response.status());
  std::printf("%s\n", name.c_str());
  return response.status() == grpc::health::v1::HealthCheckResponse::SERVING ? 0 : 1;
}

// ---- model control -----------------------------------------------------------------------

std::string FormatTime(int64_t ms) {
  const std::time_t t = static_cast<std::time_t>(ms / 1000);
  std::tm tm{};
  gmtime_r(&t, &tm);
  char text[32];
  std::strftime(text, sizeof text, "%Y-%m-%d %H:%M:%SZ", &tm);
  return text;
}

const char* GateName(plumb::v1::GateOutcome gate) {
  switch (gate) {
    case plumb::v1::GATE_PASSED:
      return "passed";
    case plumb::v1::GATE_FAILED:
      return "failed";
    case plumb::v1::GATE_SKIPPED:
      return "skipped";
    default:
      return "-";
  }
}

void PrintStatus(const plumb::v1::TrainerStatus& s) {
  const uint64_t lag =
      s.last_sequence() > s.trained_sequence() ? s.last_sequence() - s.trained_sequence() : 0;
  std::printf("active version:    %llu%s\n", static_cast<unsigned long long>(s.active_version()),
              s.active_version() == 0 ? " (none)" : "");
  std::printf("last sequence:     %llu\n", static_cast<unsigned long long>(s.last_sequence()));
  std::printf("trained sequence:  %llu (lag %llu events)\n",
              static_cast<unsigned long long>(s.trained_sequence()),
              static_cast<unsigned long long>(lag));
  std::printf("auto-activate:     %s\n", s.auto_activate() ? "on" : "off");
  std::printf("idle:              %s\n", s.idle() ? "yes (caught up, everything published)" : "no");
  std::printf("objective:         %s\n", s.objective().c_str());
  std::printf("users:             %u\n", s.num_users());
  std::printf("items:             %u\n", s.num_items());
}

int Versions(const Connection& c) {
  std::shared_ptr<grpc::Channel> channel;
  grpc::ClientContext context;
  if (Status s = Prepare(c, &channel, &context); !s.ok()) return Fail(s.message());
  plumb::v1::ListVersionsResponse response;
  const grpc::Status status = plumb::v1::ModelControl::NewStub(channel)->ListVersions(
      &context, plumb::v1::ListVersionsRequest(), &response);
  if (!status.ok()) return Fail(status);
  if (response.versions().empty()) {
    std::printf("no versions kept\n");
    return 0;
  }
  std::printf("%-2s %8s  %-20s  %-9s %10s %8s %8s %5s  %-14s %-8s %s\n", "", "version",
              "created (UTC)", "objective", "events", "users", "items", "dim", "val. recall",
              "gate", "gate reason");
  for (const plumb::v1::VersionInfo& v : response.versions()) {
    char recall[32] = "-";
    if (std::isfinite(v.validation_recall()) && v.validation_k() > 0) {
      std::snprintf(recall, sizeof recall, "%.4f @%u", v.validation_recall(), v.validation_k());
    }
    std::printf("%-2s %8llu  %-20s  %-9s %10llu %8u %8u %5u  %-14s %-8s %s\n",
                v.active() ? "*" : "", static_cast<unsigned long long>(v.version()),
                FormatTime(v.created_ms()).c_str(), v.objective().c_str(),
                static_cast<unsigned long long>(v.events_seen()), v.num_users(), v.num_items(),
                v.dim(), recall, GateName(v.gate()), v.gate_reason().c_str());
  }
  return 0;
}

int TrainerStatus(const Connection& c) {
  std::shared_ptr<grpc::Channel> channel;
  grpc::ClientContext context;
  if (Status s = Prepare(c, &channel, &context); !s.ok()) return Fail(s.message());
  plumb::v1::TrainerStatus response;
  const grpc::Status status = plumb::v1::ModelControl::NewStub(channel)->GetStatus(
      &context, plumb::v1::GetStatusRequest(), &response);
  if (!status.ok()) return Fail(status);
  PrintStatus(response);
  return 0;
}

int Activate(const Connection& c, uint64_t version) {
  std::shared_ptr<grpc::Channel> channel;
  grpc::ClientContext context;
  if (Status s = Prepare(c, &channel, &context); !s.ok()) return Fail(s.message());
  plumb::v1::ActivateRequest request;
  request.set_version(version);
  plumb::v1::ActivateResponse response;
  const grpc::Status status =
      plumb::v1::ModelControl::NewStub(channel)->Activate(&context, request, &response);
  if (!status.ok()) return Fail(status);
  std::printf("active version %llu (was %llu)\n",
              static_cast<unsigned long long>(response.active_version()),
              static_cast<unsigned long long>(response.previous_version()));
  return 0;
}

int AutoActivate(const Connection& c, const std::string& setting) {
  std::shared_ptr<grpc::Channel> channel;
  grpc::ClientContext context;
  if (Status s = Prepare(c, &channel, &context); !s.ok()) return Fail(s.message());
  plumb::v1::SetAutoActivateRequest request;
  request.set_enabled(setting == "on");
  plumb::v1::TrainerStatus response;
  const grpc::Status status =
      plumb::v1::ModelControl::NewStub(channel)->SetAutoActivate(&context, request, &response);
  if (!status.ok()) return Fail(status);
  PrintStatus(response);
  return 0;
}

// ---- command line --------------------------------------------------------------------------

void AddConnection(CLI::App* cmd, Connection* c, bool control) {
  cmd->add_option("--target", c->spec.target,
                  control ? "plumb-train address HOST:PORT" : "plumb-serve address HOST:PORT");
  cmd->add_option("--timeout-ms", c->timeout_ms, "Deadline of the call")
      ->check(CLI::Range(1, 3600000));
  cmd->add_option("--tls-ca", c->spec.tls_ca_file, "PEM CA bundle to trust: connect with TLS")
      ->check(CLI::ExistingFile);
  cmd->add_option("--tls-server-name", c->spec.tls_server_name,
                  "Name to expect in the server certificate instead of the host");
  cmd->add_option("--token-file", c->token_file,
                  control ? "File with plumb-train's bearer token"
                          : "File with plumb-serve's bearer token (if it requires one)")
      ->check(CLI::ExistingFile);
}

}  // namespace

int main(int argc, char** argv) {
  CLI::App app(
      "plumb-query: one call to a running plumb-serve (recommend, similar, rank, health) or "
      "plumb-train (versions, status, activate, auto-activate), answer printed as text.\n"
      "Exit status: 0 success (health: only when SERVING), 1 the call failed (status code and "
      "message on stderr), 2 usage error.",
      "plumb-query");
  app.option_defaults()->always_capture_default();
  app.require_subcommand(1);
  app.get_formatter()->column_width(34);

  ListArgs rec;
  CLI::App* recommend =
      app.add_subcommand("recommend", "Top-N items for a user (Ranker/Recommend)");
  AddConnection(recommend, &rec.conn, false);
  recommend->add_option("--user", rec.id, "External user id")->required();
  recommend->add_option("--count", rec.count, "How many items")->check(CLI::Range(1u, 1000000u));
  recommend->add_flag("--exclude-seen", rec.exclude_seen, "Leave out items the user already had");
  recommend
      ->add_option("--recent", rec.recent,
                   "For a user the model does not know: recent items, most recent first")
      ->delimiter(',');
  recommend->add_option("--exclude", rec.exclude, "Items never to return")->delimiter(',');
  recommend->add_flag("--fallback", rec.fallback,
                      "Unknown user without usable recent items: answer the most-interacted "
                      "items instead of NOT_FOUND");
  recommend->add_option("--names", rec.names_file, "item,name CSV (e.g. items.csv) to show names")
      ->check(CLI::ExistingFile);

  ListArgs sim;
  CLI::App* similar =
      app.add_subcommand("similar", "Items most like an item (Ranker/SimilarItems)");
  AddConnection(similar, &sim.conn, false);
  similar->add_option("--item", sim.id, "External item id")->required();
  similar->add_option("--count", sim.count, "How many items")->check(CLI::Range(1u, 1000000u));
  similar->add_option("--exclude", sim.exclude, "Items never to return")->delimiter(',');
  similar->add_option("--names", sim.names_file, "item,name CSV to show names")
      ->check(CLI::ExistingFile);

  ListArgs rk;
  CLI::App* rank =
      app.add_subcommand("rank", "Order candidate items for a user (Ranker/RankCandidates)");
  AddConnection(rank, &rk.conn, false);
  rank->add_option("--user", rk.id, "External user id")->required();
  rank->add_option("--candidates", rk.candidates, "Candidate item ids, comma-separated")
      ->delimiter(',')
      ->required();
  rank->add_option("--recent", rk.recent, "For a user the model does not know: recent items")
      ->delimiter(',');
  rank->add_option("--names", rk.names_file, "item,name CSV to show names")
      ->check(CLI::ExistingFile);

  Connection health_conn{"127.0.0.1:7400"};
  std::string health_service;
  CLI::App* health = app.add_subcommand(
      "health", "Ask grpc.health.v1.Health/Check; exit 0 only when the answer is SERVING");
  AddConnection(health, &health_conn, false);
  health->add_option("--service", health_service, "Service to ask about ('' = the server)");

  Connection control{"127.0.0.1:7601"};
  CLI::App* versions =
      app.add_subcommand("versions", "Embedding versions the trainer keeps, newest first");
  AddConnection(versions, &control, true);
  CLI::App* status =
      app.add_subcommand("status", "What the trainer is doing: log, lag, active version");
  AddConnection(status, &control, true);
  uint64_t version = 0;
  CLI::App* activate =
      app.add_subcommand("activate", "Make a kept version the active one (promote or roll back)");
  AddConnection(activate, &control, true);
  activate->add_option("--version", version, "Version number")
      ->required()
      ->check(CLI::PositiveNumber);
  std::string setting;
  CLI::App* auto_activate = app.add_subcommand(
      "auto-activate", "Turn automatic activation of gate-passing versions on or off");
  AddConnection(auto_activate, &control, true);
  auto_activate->add_option("setting", setting, "on or off")
      ->required()
      ->check(CLI::IsMember({"on", "off"}));

  try {
    app.parse(argc, argv);
  } catch (const CLI::ParseError& e) {
    if (e.get_exit_code() == 0) return app.exit(e);  // --help
    std::cerr << "plumb-query: " << e.what() << " (see --help)\n";
    return 2;
  }
  if (*recommend) return Recommend(rec);
  if (*similar) return Similar(sim);
  if (*rank) return Rank(rk);
  if (*health) return Health(health_conn, health_service);
  if (*versions) return Versions(control);
  if (*status) return TrainerStatus(control);
  if (*activate) return Activate(control, version);
  return AutoActivate(control, setting);
}
