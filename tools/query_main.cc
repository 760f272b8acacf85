// plumb-query: one call to a running plumb process, answer printed for people.
//
//   plumb-serve (Ranker, health):  recommend, similar, rank, health
//   plumb-train (ModelControl):    versions, status, activate, canary-start, canary-widen,
//                                  canary-promote, canary-abort, pin, unpin, auto-activate,
//                                  retrain, items withdraw|restore|list
//
// Exit status: 0 success (health: only when SERVING); 1 the call failed, with one line
// "plumb-query: <STATUS_CODE>: <message>" on stderr; 2 usage error.
#include <grpcpp/client_context.h>

#include <CLI/CLI.hpp>
#include <cmath>
#include <cstdio>
#include <ctime>
#include <fstream>
#include <iostream>
#include <memory>
#include <sstream>

#include "cli/item_names.h"
#include "core/duration.h"
#include "core/utc_time.h"
#include "grpc/health/v1/health.grpc.pb.h"
#include "plumb/v1/control.grpc.pb.h"
#include "plumb/v1/ranker.grpc.pb.h"
#include "tools/client_channel.h"
#include "tools/load_report.h"

namespace {

using namespace plumb::tools;
using plumb::Status;
using plumb::cli::ItemNames;

struct Connection {
  explicit Connection(std::string target) { spec.target = std::move(target); }
  ChannelSpec spec;
  std::string deadline = "5s";  // --deadline, checked when the command runs
  std::string token_file;       // sent as the bearer token, if set
};

int Fail(const std::string& message) {
  std::cerr << "plumb-query: " << message << "\n";
  return 1;
}

int Fail(const grpc::Status& status) { return Fail(DescribeStatus(status)); }

// Which process answers a command; a call to the wrong one gets UNIMPLEMENTED from gRPC, with
// no word of why, so the message then says which process answers it.
enum class Answerer {
  kUnnamed,  // the message is gRPC's alone
  kServe,    // a Ranker command: plumb-serve
  kTrain,    // a ModelControl command: plumb-train
};

int Fail(const grpc::Status& status, const std::string& target, Answerer answerer) {
  if (answerer == Answerer::kUnnamed || status.error_code() != grpc::StatusCode::UNIMPLEMENTED) {
    return Fail(status);
  }
  return Fail(DescribeStatus(status) + " (" + target + " does not serve " +
              (answerer == Answerer::kTrain
                   ? "plumb.v1.ModelControl: versions, status, activate, pin, unpin and "
                     "auto-activate are answered by plumb-train, at its --listen address "
                     "(default 127.0.0.1:7601)"
                   : "plumb.v1.Ranker: recommend, similar and rank are answered by "
                     "plumb-serve, at its --listen address (default 127.0.0.1:7400)") +
              "; is this the other process?)");
}

// Opens the channel and prepares a context with the deadline (and token, if any).
Status Prepare(const Connection& c, std::shared_ptr<grpc::Channel>* channel,
               grpc::ClientContext* context) {
  int64_t deadline_ms = 0;
  PLUMB_RETURN_IF_ERROR(
      plumb::ParseDurationIn("--deadline", c.deadline, 1, 3'600'000, &deadline_ms));
  PLUMB_RETURN_IF_ERROR(MakeChannel(c.spec, channel));
  context->set_deadline(std::chrono::system_clock::now() + std::chrono::milliseconds(deadline_ms));
  if (!c.token_file.empty()) {
    std::string token;
    PLUMB_RETURN_IF_ERROR(ReadBearerToken(c.token_file, &token));
    AttachBearerToken(token, context);
  }
  return Status::Ok();
}

// One call of `Service`'s `method` to the process at `c`, on a fresh channel with c's
// deadline and token. Returns 0 with *response filled, or 1 after printing why (first
// `note`, when not empty, on a line of its own).
template <typename Service, typename Request, typename Response>
int Call(const Connection& c, Answerer answerer,
         grpc::Status (Service::Stub::*method)(grpc::ClientContext*, const Request&, Response*),
         const Request& request, Response* response, const std::string& note = "") {
  std::shared_ptr<grpc::Channel> channel;
  grpc::ClientContext context;
  if (Status s = Prepare(c, &channel, &context); !s.ok()) return Fail(s.message());
  const auto stub = Service::NewStub(channel);
  const grpc::Status status = (stub.get()->*method)(&context, request, response);
  if (status.ok()) return 0;
  if (!note.empty()) std::cerr << "plumb-query: " << note << "\n";
  return Fail(status, c.spec.target, answerer);
}

// ---- ranker ----------------------------------------------------------------------------

struct ListArgs {
  Connection conn{"127.0.0.1:7400"};
  std::string id;  // user or item
  uint32_t count = 10;
  bool include_seen = false;
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
  plumb::v1::RecommendRequest request;
  request.set_user_id(a.id);
  request.set_count(a.count);
  request.set_include_seen(a.include_seen);
  for (const auto& item : a.recent) request.add_recent_item_ids(item);
  for (const auto& item : a.exclude) request.add_exclude_item_ids(item);
  if (a.fallback) request.set_unknown_user(plumb::v1::UNKNOWN_USER_MOST_INTERACTED);
  plumb::v1::RecommendResponse response;
  if (int rc = Call<plumb::v1::Ranker>(a.conn, Answerer::kServe,
                                       &plumb::v1::Ranker::Stub::Recommend, request, &response)) {
    return rc;
  }
  std::printf("model version %llu, user %s, %d items%s\n",
              static_cast<unsigned long long>(response.model_version()), a.id.c_str(),
              response.items_size(),
              response.fallback()    ? " (unknown user: most-interacted fallback, not personal)"
              : response.folded_in() ? " (unknown user: folded in from the recent items)"
                                     : "");
  return PrintItems(response.items(), a.names_file);
}

int Similar(const ListArgs& a) {
  plumb::v1::SimilarItemsRequest request;
  request.set_item_id(a.id);
  request.set_count(a.count);
  for (const auto& item : a.exclude) request.add_exclude_item_ids(item);
  plumb::v1::SimilarItemsResponse response;
  if (int rc = Call<plumb::v1::Ranker>(
          a.conn, Answerer::kServe, &plumb::v1::Ranker::Stub::SimilarItems, request, &response)) {
    return rc;
  }
  std::printf("model version %llu, items like %s (cosine), %d items\n",
              static_cast<unsigned long long>(response.model_version()), a.id.c_str(),
              response.items_size());
  return PrintItems(response.items(), a.names_file);
}

int Rank(const ListArgs& a) {
  plumb::v1::RankCandidatesRequest request;
  request.set_user_id(a.id);
  for (const auto& item : a.candidates) request.add_candidate_item_ids(item);
  for (const auto& item : a.recent) request.add_recent_item_ids(item);
  plumb::v1::RankCandidatesResponse response;
  if (int rc = Call<plumb::v1::Ranker>(
          a.conn, Answerer::kServe, &plumb::v1::Ranker::Stub::RankCandidates, request, &response)) {
    return rc;
  }
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
  if (rc == 0 && response.unavailable_item_ids_size() > 0) {
    std::string unavailable;
    for (const auto& id : response.unavailable_item_ids()) {
      unavailable += (unavailable.empty() ? "" : ",") + id;
    }
    std::printf("withdrawn from serving: %s\n", unavailable.c_str());
  }
  return rc;
}

int Health(const Connection& c, const std::string& service) {
  grpc::health::v1::HealthCheckRequest request;
  request.set_service(service);
  grpc::health::v1::HealthCheckResponse response;
  if (int rc = Call<grpc::health::v1::Health>(
          c, Answerer::kUnnamed, &grpc::health::v1::Health::Stub::Check, request, &response)) {
    return rc;
  }
  const std::string name =
      grpc::health::v1::HealthCheckResponse::ServingStatus_Name(response.status());
  std::printf("%s\n", name.c_str());
  return response.status() == grpc::health::v1::HealthCheckResponse::SERVING ? 0 : 1;
}

// ---- model control -----------------------------------------------------------------------

std::string FormatTime(int64_t ms) { return plumb::UtcText(ms, "%Y-%m-%d %H:%M:%SZ"); }

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

// One line, as plumb versions prints it (trainer/online/training_config.cc).
std::string FormatTraining(const plumb::v1::TrainingConfig& c) {
  if (c.origin().empty()) return "unrecorded";
  char buf[320];
  std::string k;
  if (c.objective() == "cpr") {
    k = " k=" + std::to_string(c.cpr_k());
    if (c.cpr_mix_share() > 0) {
      char mix[64];
      std::snprintf(mix, sizeof mix, " k%u-share=%g", c.cpr_mix_k(), c.cpr_mix_share());
      k += mix;
    }
  }
  std::snprintf(buf, sizeof buf, "%s%s beta=%g dim=%u %s lr=%g l2=%g batch=%u epochs=%u seed=%llu",
                c.objective().c_str(), k.c_str(), c.beta(), c.dim(), c.optimizer().c_str(),
                c.learning_rate(), c.l2(), c.batch_size(), c.epochs(),
                static_cast<unsigned long long>(c.seed()));
  std::string out = buf;
  if (c.tune_betas_size() > 0) {
    out.replace(
        out.find(" dim="), 0, " (tuned from " + [&] {
          std::string l;
          char b[32];
          for (double x : c.tune_betas()) {
            std::snprintf(b, sizeof b, "%s%g", l.empty() ? "" : ",", x);
            l += b;
          }
          return l;
        }() + ")");
  }
  if (c.origin() == "online") {
    std::snprintf(buf, sizeof buf, " replay=%g", c.replay_ratio());
    out += buf;
  }
  if (c.holdout_fraction() > 0) {
    std::snprintf(buf, sizeof buf, " holdout=%g", c.holdout_fraction());
    out += buf;
  }
  if (c.training_window_ms() > 0) {
    std::snprintf(buf, sizeof buf, " window=%gh",
                  static_cast<double>(c.training_window_ms()) / 3.6e6);
    out += buf;
  }
  return out;
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
  std::printf("auto-activate:     %s%s%s\n", s.auto_activate() ? "on" : "off",
              s.auto_activate_reason().empty() ? "" : " - ", s.auto_activate_reason().c_str());
  if (s.canary_version() != 0) {
    std::printf("canary:            version %llu serves %g %% of the subjects since %s\n",
                static_cast<unsigned long long>(s.canary_version()), s.canary_share_percent(),
                FormatTime(s.canary_started_ms()).c_str());
  } else {
    std::printf("canary:            none\n");
  }
  std::printf("idle:              %s\n", s.idle() ? "yes (caught up, everything published)" : "no");
  std::printf("training:          %s\n", FormatTraining(s.training()).c_str());
  if (!s.pending_config_change().empty()) {
    std::printf(
        "config change:     %s; publishing waits for the rebuild, the active version "
        "stays in charge\n",
        s.pending_config_change().c_str());
  }
  std::printf(
      "refits:            %llu done, %llu failed%s%s; last took %.1f s; the model's last "
      "refit covered %llu of %llu training pairs\n",
      static_cast<unsigned long long>(s.refits_completed()),
      static_cast<unsigned long long>(s.refits_failed()), s.refit_running() ? "; running: " : "",
      s.refit_running() ? s.refit_reason().c_str() : "", s.last_refit_seconds(),
      static_cast<unsigned long long>(s.refit_pairs()),
      static_cast<unsigned long long>(s.train_pairs()));
  if (s.tuned_beta() > 0) {
    std::printf("tuned beta:        %g - %s\n", s.tuned_beta(), s.tune_reason().c_str());
  }
  std::printf("candidates:        %llu passed, %llu failed, %llu skipped (since start)\n",
              static_cast<unsigned long long>(s.candidates_passed()),
              static_cast<unsigned long long>(s.candidates_failed()),
              static_cast<unsigned long long>(s.candidates_skipped()));
  std::printf("objective:         %s\n", s.objective().c_str());
  std::printf("users:             %u\n", s.num_users());
  std::printf("items:             %u\n", s.num_items());
  std::printf("withdrawn items:   %llu\n", static_cast<unsigned long long>(s.withdrawn_items()));
  std::printf("event log:         %llu events, %.1f MB%s%s\n",
              static_cast<unsigned long long>(s.log_events()), s.log_bytes() / 1e6,
              s.log_events() > 0 ? "; oldest " : "",
              s.log_events() > 0 ? FormatTime(s.oldest_event_ms()).c_str() : "");
  std::printf("retention:         %llu events (%.1f MB) removed, kept as %llu (user, item) pairs\n",
              static_cast<unsigned long long>(s.retention_removed_events()),
              s.retention_removed_bytes() / 1e6,
              static_cast<unsigned long long>(s.retention_pairs()));
}

int Versions(const Connection& c) {
  plumb::v1::ListVersionsResponse response;
  if (int rc = Call<plumb::v1::ModelControl>(c, Answerer::kTrain,
                                             &plumb::v1::ModelControl::Stub::ListVersions,
                                             plumb::v1::ListVersionsRequest(), &response)) {
    return rc;
  }
  if (response.versions().empty()) {
    std::printf("no versions kept\n");
    return 0;
  }
  std::printf("%-2s %8s  %-20s  %-9s %10s %8s %8s %5s  %-14s %-8s %-6s %s\n", "", "version",
              "created (UTC)", "objective", "events", "users", "items", "dim", "val. recall",
              "gate", "pinned", "gate reason");
  for (const plumb::v1::VersionInfo& v : response.versions()) {
    char recall[32] = "-";
    if (std::isfinite(v.validation_recall()) && v.validation_k() > 0) {
      std::snprintf(recall, sizeof recall, "%.4f @%u", v.validation_recall(), v.validation_k());
    }
    std::printf("%-2s %8llu  %-20s  %-9s %10llu %8u %8u %5u  %-14s %-8s %-6s %s\n",
                v.active() ? "*" : "", static_cast<unsigned long long>(v.version()),
                FormatTime(v.created_ms()).c_str(), v.objective().c_str(),
                static_cast<unsigned long long>(v.events_seen()), v.num_users(), v.num_items(),
                v.dim(), recall, GateName(v.gate()), v.pinned() ? "yes" : "-",
                v.gate_reason().c_str());
    std::printf("%-2s %8s  trained: %s\n", "", "", FormatTraining(v.training()).c_str());
    if (std::isfinite(v.validation_shift())) {
      std::printf("%-2s %8s  popularity shift on validation %+.3f (%s), distance %.3f\n", "", "",
                  v.validation_shift(),
                  v.validation_shift() > 0 ? "toward the head: under-corrected"
                                           : "toward the tail: over-corrected",
                  v.validation_shift_distance());
    }
    if (!v.tune_reason().empty()) {
      std::printf("%-2s %8s  tuned: %s\n", "", "", v.tune_reason().c_str());
    }
  }
  return 0;
}

int Retrain(const Connection& c, const std::string& reason) {
  plumb::v1::RetrainRequest request;
  request.set_reason(reason);
  plumb::v1::TrainerStatus response;
  if (int rc = Call<plumb::v1::ModelControl>(
          c, Answerer::kUnnamed, &plumb::v1::ModelControl::Stub::Retrain, request, &response)) {
    return rc;
  }
  std::printf(
      "rebuild from the whole event log requested; it is published as a gated "
      "candidate when it lands\n");
  PrintStatus(response);
  return 0;
}

int TrainerStatus(const Connection& c) {
  plumb::v1::TrainerStatus response;
  if (int rc = Call<plumb::v1::ModelControl>(c, Answerer::kTrain,
                                             &plumb::v1::ModelControl::Stub::GetStatus,
                                             plumb::v1::GetStatusRequest(), &response)) {
    return rc;
  }
  PrintStatus(response);
  return 0;
}

int Activate(const Connection& c, uint64_t version) {
  plumb::v1::ActivateRequest request;
  request.set_version(version);
  plumb::v1::ActivateResponse response;
  if (int rc = Call<plumb::v1::ModelControl>(
          c, Answerer::kTrain, &plumb::v1::ModelControl::Stub::Activate, request, &response)) {
    return rc;
  }
  std::printf("active version %llu (was %llu)\n",
              static_cast<unsigned long long>(response.active_version()),
              static_cast<unsigned long long>(response.previous_version()));
  return 0;
}

int Pin(const Connection& c, uint64_t version, bool pinned) {
  plumb::v1::SetPinnedRequest request;
  request.set_version(version);
  request.set_pinned(pinned);
  plumb::v1::VersionInfo response;
  if (int rc = Call<plumb::v1::ModelControl>(
          c, Answerer::kTrain, &plumb::v1::ModelControl::Stub::SetPinned, request, &response)) {
    return rc;
  }
  std::printf(
      "version %llu is %s\n", static_cast<unsigned long long>(response.version()),
      response.pinned() ? "pinned: never pruned" : "unpinned: pruned by the retention rules");
  return 0;
}

// canary-start (version given) and canary-widen (version 0: the running canary's).
int StartCanary(const Connection& c, uint64_t version, double share_percent) {
  if (version == 0) {
    plumb::v1::TrainerStatus status;
    if (int rc = Call<plumb::v1::ModelControl>(c, Answerer::kTrain,
                                               &plumb::v1::ModelControl::Stub::GetStatus,
                                               plumb::v1::GetStatusRequest(), &status)) {
      return rc;
    }
    if (status.canary_version() == 0) {
      std::fprintf(stderr,
                   "plumb-query: no canary runs; start one with canary-start --model-version N "
                   "--share PERCENT\n");
      return 1;
    }
    version = status.canary_version();
  }
  plumb::v1::SetCanaryRequest request;
  request.set_version(version);
  request.set_share_percent(share_percent);
  plumb::v1::TrainerStatus response;
  if (int rc = Call<plumb::v1::ModelControl>(
          c, Answerer::kTrain, &plumb::v1::ModelControl::Stub::SetCanary, request, &response)) {
    return rc;
  }
  std::printf("canary: version %llu serves %g %% of the subjects, version %llu the rest\n",
              static_cast<unsigned long long>(response.canary_version()),
              response.canary_share_percent(),
              static_cast<unsigned long long>(response.active_version()));
  return 0;
}

int EndCanary(const Connection& c, bool promote) {
  plumb::v1::EndCanaryRequest request;
  request.set_promote(promote);
  plumb::v1::TrainerStatus response;
  if (int rc = Call<plumb::v1::ModelControl>(
          c, Answerer::kTrain, &plumb::v1::ModelControl::Stub::EndCanary, request, &response)) {
    return rc;
  }
  if (promote) {
    std::printf("canary promoted: version %llu is active and serves everyone\n",
                static_cast<unsigned long long>(response.active_version()));
  } else {
    std::printf("canary aborted: version %llu serves everyone\n",
                static_cast<unsigned long long>(response.active_version()));
  }
  return 0;
}

int AutoActivate(const Connection& c, const std::string& setting) {
  plumb::v1::SetAutoActivateRequest request;
  request.set_enabled(setting == "on");
  plumb::v1::TrainerStatus response;
  if (int rc = Call<plumb::v1::ModelControl>(c, Answerer::kTrain,
                                             &plumb::v1::ModelControl::Stub::SetAutoActivate,
                                             request, &response)) {
    return rc;
  }
  PrintStatus(response);
  return 0;
}

// ---- item availability ---------------------------------------------------------------------

struct ItemsArgs {
  Connection conn{"127.0.0.1:7601"};
  std::string item;        // --item
  std::string items_file;  // --items-file: one id per line
  bool json = false;       // list --json
};

// The ids of --item and --items-file (blank lines and lines starting with '#' skipped; ids are
// trimmed of surrounding spaces and a trailing '\r').
Status CollectItemIds(const ItemsArgs& a, std::vector<std::string>* ids) {
  ids->clear();
  if (!a.item.empty()) ids->push_back(a.item);
  if (!a.items_file.empty()) {
    std::ifstream in(a.items_file);
    if (!in) return Status::IoError("cannot read " + a.items_file);
    std::string line;
    while (std::getline(in, line)) {
      const size_t begin = line.find_first_not_of(" \t\r");
      if (begin == std::string::npos || line[begin] == '#') continue;
      const size_t end = line.find_last_not_of(" \t\r");
      ids->push_back(line.substr(begin, end - begin + 1));
    }
  }
  if (ids->empty()) {
    return Status::InvalidArgument("no item ids: give --item ID or --items-file FILE");
  }
  return Status::Ok();
}

// Withdraws or restores in calls of at most 100000 ids (the RPC's limit).
int SetAvailability(const ItemsArgs& a, bool withdrawn) {
  std::vector<std::string> ids;
  if (Status s = CollectItemIds(a, &ids); !s.ok()) return Fail(s.message());
  constexpr size_t kPerCall = 100000;
  uint64_t changed = 0, unchanged = 0, total = 0;
  for (size_t from = 0; from < ids.size(); from += kPerCall) {
    plumb::v1::SetItemAvailabilityRequest request;
    for (size_t j = from; j < std::min(ids.size(), from + kPerCall); ++j) {
      request.add_item_ids(ids[j]);
    }
    request.set_withdrawn(withdrawn);
    plumb::v1::SetItemAvailabilityResponse response;
    const std::string note = from == 0
                                 ? ""
                                 : "the first " + std::to_string(from) + " ids were " +
                                       (withdrawn ? "withdrawn" : "restored") + " before the error";
    if (int rc = Call<plumb::v1::ModelControl>(a.conn, Answerer::kTrain,
                                               &plumb::v1::ModelControl::Stub::SetItemAvailability,
                                               request, &response, note)) {
      return rc;
    }
    changed += response.changed();
    unchanged += response.unchanged();
    total = response.withdrawn_items();
  }
  std::printf("%s %llu items (%llu already %s); %llu items withdrawn in all\n",
              withdrawn ? "withdrew" : "restored", static_cast<unsigned long long>(changed),
              static_cast<unsigned long long>(unchanged), withdrawn ? "withdrawn" : "available",
              static_cast<unsigned long long>(total));
  return 0;
}

int ListWithdrawn(const ItemsArgs& a) {
  std::string start_after;
  std::vector<plumb::v1::WithdrawnItem> items;
  do {
    plumb::v1::ListWithdrawnItemsRequest request;
    request.set_start_after(start_after);
    request.set_limit(10000);
    plumb::v1::ListWithdrawnItemsResponse response;
    if (int rc = Call<plumb::v1::ModelControl>(a.conn, Answerer::kTrain,
                                               &plumb::v1::ModelControl::Stub::ListWithdrawnItems,
                                               request, &response)) {
      return rc;
    }
    for (const auto& item : response.items()) items.push_back(item);
    start_after = response.next_start_after();
  } while (!start_after.empty());
  if (a.json) {
    std::printf("{\"withdrawn_items\": [");
    for (size_t j = 0; j < items.size(); ++j) {
      std::printf("%s{\"item\": %s, \"withdrawn_ms\": %lld}", j == 0 ? "" : ", ",
                  JsonString(items[j].item_id()).c_str(),
                  static_cast<long long>(items[j].withdrawn_ms()));
    }
    std::printf("]}\n");
    return 0;
  }
  if (items.empty()) {
    std::printf("no items withdrawn\n");
    return 0;
  }
  for (const auto& item : items) {
    std::printf("%s  withdrawn %s\n", item.item_id().c_str(),
                FormatTime(item.withdrawn_ms()).c_str());
  }
  std::printf("%zu items withdrawn\n", items.size());
  return 0;
}

// ---- command line --------------------------------------------------------------------------

void AddConnection(CLI::App* cmd, Connection* c, bool control) {
  if (control) {
    cmd->add_option("--trainer", c->spec.target, "plumb-train address HOST:PORT");
  } else {
    cmd->add_option("--server", c->spec.target, "plumb-serve address HOST:PORT");
  }
  cmd->add_option("--deadline", c->deadline, "Deadline of the call (1ms .. 1h)");
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
      "plumb-train (versions, status, activate, auto-activate, retrain), answer printed as "
      "text.\n"
      "Exit status: 0 success (health: only when SERVING), 1 the call failed (status code and "
      "message on stderr), 2 usage error.",
      "plumb-query");
  app.option_defaults()->always_capture_default();
  app.require_subcommand(1);
  app.set_version_flag("--version", std::string("plumb-query ") + PLUMB_VERSION);
  app.get_formatter()->column_width(34);

  ListArgs rec;
  CLI::App* recommend =
      app.add_subcommand("recommend", "Top-N items for a user (Ranker/Recommend)");
  AddConnection(recommend, &rec.conn, false);
  recommend->add_option("--user", rec.id, "External user id")->required()->default_str("");
  recommend->add_option("--count", rec.count, "How many items")->check(CLI::Range(1u, 1000000u));
  recommend->add_flag("--include-seen", rec.include_seen,
                      "Also return items the user already had (default: left out)");
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
  similar->add_option("--item", sim.id, "External item id")->required()->default_str("");
  similar->add_option("--count", sim.count, "How many items")->check(CLI::Range(1u, 1000000u));
  similar->add_option("--exclude", sim.exclude, "Items never to return")->delimiter(',');
  similar->add_option("--names", sim.names_file, "item,name CSV to show names")
      ->check(CLI::ExistingFile);

  ListArgs rk;
  CLI::App* rank =
      app.add_subcommand("rank", "Order candidate items for a user (Ranker/RankCandidates)");
  AddConnection(rank, &rk.conn, false);
  rank->add_option("--user", rk.id, "External user id")->required()->default_str("");
  rank->add_option("--candidates", rk.candidates, "Candidate item ids, comma-separated")
      ->delimiter(',')
      ->required()
      ->default_str("");
  rank->add_option("--recent", rk.recent, "For a user the model does not know: recent items")
      ->delimiter(',');
  rank->add_option("--names", rk.names_file, "item,name CSV to show names")
      ->check(CLI::ExistingFile);

  Connection health_conn{"127.0.0.1:7400"};
  std::string health_service;
  CLI::App* health = app.add_subcommand(
      "health", "Ask grpc.health.v1.Health/Check; exit 0 only when the answer is SERVING");
  AddConnection(health, &health_conn, false);
  health->add_option("--health-service", health_service,
                     "Service to ask about ('' = the server as a whole)");

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
  activate->add_option("--model-version", version, "Version number")
      ->required()
      ->default_str("")
      ->check(CLI::PositiveNumber);
  uint64_t pin_version = 0;
  CLI::App* pin = app.add_subcommand(
      "pin", "Pin a kept version: never pruned, whatever its age (ModelControl/SetPinned)");
  AddConnection(pin, &control, true);
  pin->add_option("--model-version", pin_version, "Version number")
      ->required()
      ->default_str("")
      ->check(CLI::PositiveNumber);
  CLI::App* unpin = app.add_subcommand("unpin", "Unpin a version: the retention rules apply again");
  AddConnection(unpin, &control, true);
  unpin->add_option("--model-version", pin_version, "Version number")
      ->required()
      ->default_str("")
      ->check(CLI::PositiveNumber);
  std::string setting;
  CLI::App* auto_activate = app.add_subcommand(
      "auto-activate", "Turn automatic activation of gate-passing versions on or off");
  AddConnection(auto_activate, &control, true);
  auto_activate->add_option("setting", setting, "on or off")
      ->required()
      ->check(CLI::IsMember({"on", "off"}));

  uint64_t canary_version = 0;
  double canary_share = 0;
  CLI::App* canary_start =
      app.add_subcommand("canary-start",
                         "Serve a kept version to a share of the users beside the active one "
                         "(ModelControl/SetCanary; pauses automatic activation)");
  AddConnection(canary_start, &control, true);
  canary_start->add_option("--model-version", canary_version, "The candidate version")
      ->required()
      ->default_str("")
      ->check(CLI::PositiveNumber);
  CLI::App* canary_widen = app.add_subcommand(
      "canary-widen", "Change the running canary's share (ModelControl/SetCanary)");
  AddConnection(canary_widen, &control, true);
  for (CLI::App* cmd : {canary_start, canary_widen}) {
    cmd->add_option("--share", canary_share, "Percent of the users served the candidate")
        ->required()
        ->default_str("")
        ->check(CLI::Range(0.01, 100.0));
  }
  CLI::App* canary_promote = app.add_subcommand(
      "canary-promote", "Make the canary's version active for everyone (ModelControl/EndCanary)");
  AddConnection(canary_promote, &control, true);
  CLI::App* canary_abort = app.add_subcommand(
      "canary-abort", "End the canary: serve everyone the active version (ModelControl/EndCanary)");
  AddConnection(canary_abort, &control, true);

  std::string retrain_reason;
  CLI::App* retrain = app.add_subcommand(
      "retrain", "Rebuild the model from the whole event log in the background (a refit)");
  AddConnection(retrain, &control, true);
  retrain->add_option("--reason", retrain_reason, "Why (shown in status and the trainer's log)");

  ItemsArgs items_args;
  CLI::App* items = app.add_subcommand(
      "items", "Withdraw items from serving, restore them, or list the withdrawn ones");
  items->require_subcommand(1);
  CLI::App* withdraw =
      items->add_subcommand("withdraw",
                            "Stop serving items (sold out, deleted, banned) without a new version "
                            "(ModelControl/SetItemAvailability)");
  CLI::App* restore = items->add_subcommand("restore", "Serve withdrawn items again");
  for (CLI::App* cmd : {withdraw, restore}) {
    AddConnection(cmd, &items_args.conn, true);
    cmd->add_option("--item", items_args.item, "External item id");
    cmd->add_option("--items-file", items_args.items_file, "Item ids, one per line (bulk form)")
        ->check(CLI::ExistingFile);
  }
  CLI::App* list_withdrawn = items->add_subcommand("list", "The withdrawn items, in id order");
  AddConnection(list_withdrawn, &items_args.conn, true);
  list_withdrawn->add_flag("--json", items_args.json, "Print JSON instead of text");

  try {
    app.parse(argc, argv);
  } catch (const CLI::ParseError& e) {
    if (e.get_exit_code() == 0) return app.exit(e);  // --help, --version
    std::cerr << "plumb-query: " << e.what() << " (see --help)\n";
    return 2;
  }
  // A --deadline that is not a duration is a usage error (every other connection keeps its
  // valid default).
  for (const Connection* c :
       {&rec.conn, &sim.conn, &rk.conn, &health_conn, &control, &items_args.conn}) {
    int64_t ms = 0;
    if (Status s = plumb::ParseDurationIn("--deadline", c->deadline, 1, 3'600'000, &ms); !s.ok()) {
      std::cerr << "plumb-query: " << s.message() << " (see --help)\n";
      return 2;
    }
  }
  if (*recommend) return Recommend(rec);
  if (*similar) return Similar(sim);
  if (*rank) return Rank(rk);
  if (*health) return Health(health_conn, health_service);
  if (*versions) return Versions(control);
  if (*status) return TrainerStatus(control);
  if (*activate) return Activate(control, version);
  if (*retrain) return Retrain(control, retrain_reason);
  if (*withdraw) return SetAvailability(items_args, true);
  if (*restore) return SetAvailability(items_args, false);
  if (*list_withdrawn) return ListWithdrawn(items_args);
  if (*canary_start) return StartCanary(control, canary_version, canary_share);
  if (*canary_widen) return StartCanary(control, 0, canary_share);
  if (*canary_promote) return EndCanary(control, true);
  if (*canary_abort) return EndCanary(control, false);
  if (*pin) return Pin(control, pin_version, true);
  if (*unpin) return Pin(control, pin_version, false);
  return AutoActivate(control, setting);
}
