#include "server/ranker_service.h"

#include <string>
#include <string_view>
#include <vector>

#include "rpc/checked_methods.h"
#include "rpc/grpc_status.h"

namespace plumb::server {

namespace {

using google::protobuf::RepeatedPtrField;

grpc::Status Invalid(std::string message) {
  return grpc::Status(grpc::StatusCode::INVALID_ARGUMENT, std::move(message));
}

// Empty when `id` is 1..max_bytes bytes long; otherwise the error naming `field`.
std::string CheckId(std::string_view field, const std::string& id, uint32_t max_bytes) {
  if (id.empty()) {
    return std::string(field) + " is required (1.." + std::to_string(max_bytes) + " bytes)";
  }
  if (id.size() > max_bytes) {
    return std::string(field) + " is " + std::to_string(id.size()) + " bytes; the limit is " +
           std::to_string(max_bytes);
  }
  return {};
}

std::string CheckIdList(std::string_view field, const RepeatedPtrField<std::string>& ids,
                        uint32_t max_entries, uint32_t max_bytes) {
  if (static_cast<size_t>(ids.size()) > max_entries) {
    return std::string(field) + " has " + std::to_string(ids.size()) + " entries; the limit is " +
           std::to_string(max_entries);
  }
  for (int j = 0; j < ids.size(); ++j) {
    std::string error =
        CheckId(std::string(field) + "[" + std::to_string(j) + "]", ids[j], max_bytes);
    if (!error.empty()) return error;
  }
  return {};
}

std::string CheckCount(uint32_t count, uint32_t max_count) {
  if (count == 0 || count > max_count) {
    return "count must be 1.." + std::to_string(max_count) + ", got " + std::to_string(count);
  }
  return {};
}

// Views of a repeated string field, in a per-thread vector reused across requests. Slot
// tells two lists of the same request apart.
std::span<const std::string_view> Views(const RepeatedPtrField<std::string>& ids, int slot) {
  thread_local std::vector<std::string_view> views[2];
  std::vector<std::string_view>& v = views[slot];
  v.assign(ids.begin(), ids.end());
  return v;
}

RankedList& ThreadRankedList() {
  thread_local RankedList list;
  return list;
}

grpc::Status NoSnapshot() {
  return grpc::Status(grpc::StatusCode::UNAVAILABLE,
                      "no embedding version is loaded yet; plumb-serve answers once the "
                      "trainer has published and activated one");
}

// rpc/grpc_status.h's mapping, except that Aborted is how the Scorer and the admission queue
// report a passed deadline (they return no other Aborted): DEADLINE_EXCEEDED.
grpc::Status ToGrpc(const Status& s) {
  if (s.code() == Status::Code::kAborted) {
    return grpc::Status(grpc::StatusCode::DEADLINE_EXCEEDED, s.message());
  }
  return rpc::ToGrpcStatus(s);
}

template <typename Response>
void AddItems(const Snapshot& snap, std::span<const ScoredIndex> items, Response* response) {
  response->mutable_items()->Reserve(static_cast<int>(items.size()));
  for (const ScoredIndex& scored : items) {
    plumb::v1::ScoredItem* item = response->add_items();
    item->set_item_id(std::string(snap.item_id(scored.index)));
    item->set_score(scored.score);
  }
}

}  // namespace

RankerService::RankerService(const SnapshotHolder* holder, const Scorer* scorer,
                             RankerLimits limits, ExposureSink* exposure, ServingMetrics* metrics)
    : holder_(holder), scorer_(scorer), limits_(limits), exposure_(exposure), metrics_(metrics) {
  // Requests are decoded by plumb, not gRPC (rpc/checked_methods.h): one that cannot be
  // decoded gets INVALID_ARGUMENT naming the field and is counted here; the methods count
  // every other outcome themselves.
  using namespace plumb::v1;
  auto observer = [this](RankerMethod method) -> rpc::CallObserver {
    return [this, method](const grpc::Status& status, bool undecodable, double seconds) {
      if (undecodable && metrics_ != nullptr) {
        metrics_->ObserveRequest(method, status.error_code(), seconds);
      }
    };
  };
  const std::string service = Ranker::service_full_name();
  MarkMethodStreamed(rpc::MethodIndex(service, "Recommend"),
                     rpc::CheckedUnary<RecommendRequest, RecommendResponse>(
                         [this](grpc::ServerContext* c, const RecommendRequest* q,
                                RecommendResponse* r) { return Recommend(c, q, r); },
                         observer(RankerMethod::kRecommend)));
  MarkMethodStreamed(rpc::MethodIndex(service, "RankCandidates"),
                     rpc::CheckedUnary<RankCandidatesRequest, RankCandidatesResponse>(
                         [this](grpc::ServerContext* c, const RankCandidatesRequest* q,
                                RankCandidatesResponse* r) { return RankCandidates(c, q, r); },
                         observer(RankerMethod::kRankCandidates)));
  MarkMethodStreamed(rpc::MethodIndex(service, "SimilarItems"),
                     rpc::CheckedUnary<SimilarItemsRequest, SimilarItemsResponse>(
                         [this](grpc::ServerContext* c, const SimilarItemsRequest* q,
                                SimilarItemsResponse* r) { return SimilarItems(c, q, r); },
                         observer(RankerMethod::kSimilarItems)));
}

void RankerService::Finish(RankerMethod method, const grpc::Status& status,
                           std::chrono::steady_clock::time_point start) const {
  if (metrics_ == nullptr) return;
  const double seconds =
      std::chrono::duration<double>(std::chrono::steady_clock::now() - start).count();
  metrics_->ObserveRequest(method, status.error_code(), seconds);
}

grpc::Status RankerService::Admit(RankerMethod method, const grpc::ServerContext& context,
                                  AdmissionQueue::Ticket* ticket) {
  if (admission_ == nullptr) return grpc::Status::OK;
  Status s = admission_->Enter(context.deadline(), ticket);
  if (s.ok()) return grpc::Status::OK;
  if (metrics_ != nullptr) {
    static const char* const kNames[] = {"Recommend", "RankCandidates", "SimilarItems"};
    metrics_->ObserveRejection(kNames[static_cast<int>(method)], s.code() == Status::Code::kAborted
                                                                     ? Rejection::kDeadlineInQueue
                                                                     : Rejection::kQueueFull);
  }
  return ToGrpc(s);
}

void RankerService::RecordExposure(const Snapshot& snap, std::span<const ScoredIndex> items) const {
  if (exposure_ == nullptr) return;
  thread_local std::vector<uint32_t> indexes;
  indexes.clear();
  for (const ScoredIndex& s : items) indexes.push_back(s.index);
  exposure_->Record(snap, indexes);
}

grpc::Status RankerService::Recommend(grpc::ServerContext* context,
                                      const plumb::v1::RecommendRequest* request,
                                      plumb::v1::RecommendResponse* response) {
  const auto start = std::chrono::steady_clock::now();
  grpc::Status status = [&]() -> grpc::Status {
    if (auth_ != nullptr) {
      if (grpc::Status a = auth_->Check(*context); !a.ok()) return a;
    }
    std::string error = CheckId("user_id", request->user_id(), limits_.max_id_bytes);
    if (error.empty()) error = CheckCount(request->count(), limits_.max_count);
    if (error.empty()) {
      error = CheckIdList("exclude_item_ids", request->exclude_item_ids(), limits_.max_exclusions,
                          limits_.max_id_bytes);
    }
    if (error.empty()) {
      error = CheckIdList("recent_item_ids", request->recent_item_ids(), limits_.max_recent,
                          limits_.max_id_bytes);
    }
    if (error.empty() && !plumb::v1::UnknownUserPolicy_IsValid(request->unknown_user())) {
      error = "unknown_user has no meaning for value " + std::to_string(request->unknown_user());
    }
    if (!error.empty()) return Invalid(std::move(error));

    AdmissionQueue::Ticket ticket;
    if (grpc::Status a = Admit(RankerMethod::kRecommend, *context, &ticket); !a.ok()) return a;
    std::shared_ptr<const Snapshot> snap = holder_->GetFor(request->user_id());
    if (snap == nullptr) return NoSnapshot();
    const std::shared_ptr<const WithdrawnItems> withdrawn = holder_->GetWithdrawn();
    RecommendQuery query;
    query.withdrawn = withdrawn.get();
    query.user_id = request->user_id();
    query.count = request->count();
    query.exclude_seen = !request->include_seen();
    query.exclude_item_ids = Views(request->exclude_item_ids(), 0);
    query.recent_item_ids = Views(request->recent_item_ids(), 1);
    query.unknown_user = request->unknown_user() == plumb::v1::UNKNOWN_USER_MOST_INTERACTED
                             ? UnknownUserPolicy::kMostInteracted
                             : UnknownUserPolicy::kFail;
    query.deadline = context->deadline();
    RankedList& ranked = ThreadRankedList();
    Status s = scorer_->Recommend(*snap, query, &ranked);
    if (!s.ok()) return ToGrpc(s);

    AddItems(*snap, ranked.items, response);
    response->set_model_version(ranked.version);
    response->set_folded_in(ranked.folded_in);
    response->set_fallback(ranked.fallback);
    RecordExposure(*snap, ranked.items);
    return grpc::Status::OK;
  }();
  Finish(RankerMethod::kRecommend, status, start);
  return status;
}

grpc::Status RankerService::RankCandidates(grpc::ServerContext* context,
                                           const plumb::v1::RankCandidatesRequest* request,
                                           plumb::v1::RankCandidatesResponse* response) {
  const auto start = std::chrono::steady_clock::now();
  grpc::Status status = [&]() -> grpc::Status {
    if (auth_ != nullptr) {
      if (grpc::Status a = auth_->Check(*context); !a.ok()) return a;
    }
    std::string error = CheckId("user_id", request->user_id(), limits_.max_id_bytes);
    if (error.empty() && request->candidate_item_ids().empty()) {
      error = "candidate_item_ids is required (1.." + std::to_string(limits_.max_candidates) +
              " entries)";
    }
    if (error.empty()) {
      error = CheckIdList("candidate_item_ids", request->candidate_item_ids(),
                          limits_.max_candidates, limits_.max_id_bytes);
    }
    if (error.empty()) {
      error = CheckIdList("recent_item_ids", request->recent_item_ids(), limits_.max_recent,
                          limits_.max_id_bytes);
    }
    if (!error.empty()) return Invalid(std::move(error));

    AdmissionQueue::Ticket ticket;
    if (grpc::Status a = Admit(RankerMethod::kRankCandidates, *context, &ticket); !a.ok()) return a;
    std::shared_ptr<const Snapshot> snap = holder_->GetFor(request->user_id());
    if (snap == nullptr) return NoSnapshot();
    const std::shared_ptr<const WithdrawnItems> withdrawn = holder_->GetWithdrawn();
    CandidatesQuery query;
    query.withdrawn = withdrawn.get();
    query.user_id = request->user_id();
    query.candidate_item_ids = Views(request->candidate_item_ids(), 0);
    query.recent_item_ids = Views(request->recent_item_ids(), 1);
    query.deadline = context->deadline();
    RankedList& ranked = ThreadRankedList();
    Status s = scorer_->RankCandidates(*snap, query, &ranked);
    if (!s.ok()) return ToGrpc(s);

    AddItems(*snap, ranked.items, response);
    for (uint32_t j : ranked.unknown_candidates) {
      response->add_unknown_item_ids(request->candidate_item_ids(static_cast<int>(j)));
    }
    for (uint32_t j : ranked.unavailable_candidates) {
      response->add_unavailable_item_ids(request->candidate_item_ids(static_cast<int>(j)));
    }
    response->set_model_version(ranked.version);
    response->set_folded_in(ranked.folded_in);
    RecordExposure(*snap, ranked.items);
    return grpc::Status::OK;
  }();
  Finish(RankerMethod::kRankCandidates, status, start);
  return status;
}

grpc::Status RankerService::SimilarItems(grpc::ServerContext* context,
                                         const plumb::v1::SimilarItemsRequest* request,
                                         plumb::v1::SimilarItemsResponse* response) {
  const auto start = std::chrono::steady_clock::now();
  grpc::Status status = [&]() -> grpc::Status {
    if (auth_ != nullptr) {
      if (grpc::Status a = auth_->Check(*context); !a.ok()) return a;
    }
    std::string error = CheckId("item_id", request->item_id(), limits_.max_id_bytes);
    if (error.empty()) error = CheckCount(request->count(), limits_.max_count);
    if (error.empty()) {
      error = CheckIdList("exclude_item_ids", request->exclude_item_ids(), limits_.max_exclusions,
                          limits_.max_id_bytes);
    }
    if (!error.empty()) return Invalid(std::move(error));

    AdmissionQueue::Ticket ticket;
    if (grpc::Status a = Admit(RankerMethod::kSimilarItems, *context, &ticket); !a.ok()) return a;
    std::shared_ptr<const Snapshot> snap = holder_->GetFor(request->item_id());
    if (snap == nullptr) return NoSnapshot();
    const std::shared_ptr<const WithdrawnItems> withdrawn = holder_->GetWithdrawn();
    SimilarQuery query;
    query.withdrawn = withdrawn.get();
    query.item_id = request->item_id();
    query.count = request->count();
    query.exclude_item_ids = Views(request->exclude_item_ids(), 0);
    query.deadline = context->deadline();
    RankedList& ranked = ThreadRankedList();
    Status s = scorer_->SimilarItems(*snap, query, &ranked);
    if (!s.ok()) return ToGrpc(s);

    AddItems(*snap, ranked.items, response);
    response->set_model_version(ranked.version);
    RecordExposure(*snap, ranked.items);
    return grpc::Status::OK;
  }();
  Finish(RankerMethod::kSimilarItems, status, start);
  return status;
}

}  // namespace plumb::server
