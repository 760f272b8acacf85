// RankerService: plumb.v1.Ranker over gRPC's synchronous API.
//
// Each method does three things in order, as gRPC's own examples do: validate the request
// (INVALID_ARGUMENT with a message naming the field), call the domain (Scorer) on the
// snapshot current at the start of the call (the canary's for a subject in its share: the user
// of Recommend and RankCandidates, the item of SimilarItems; SnapshotHolder::GetFor), and translate
// the answer into the response. It knows protobuf and gRPC; the Scorer knows neither.
#pragma once

#include <grpcpp/grpcpp.h>

#include <cstdint>

#include "rpc/bearer_auth.h"
#include "plumb/v1/ranker.grpc.pb.h"
#include "server/admission_queue.h"
#include "server/exposure_sink.h"
#include "server/scorer.h"
#include "server/serving_metrics.h"
#include "server/snapshot_holder.h"

namespace plumb::server {

// Request limits. Each one is documented on its field in ranker.proto.
struct RankerLimits {
  uint32_t max_count = 1000;        // Recommend / SimilarItems count
  uint32_t max_candidates = 10000;  // RankCandidates candidate_item_ids
  uint32_t max_exclusions = 10000;  // exclude_item_ids
  uint32_t max_recent = 1000;       // recent_item_ids
  uint32_t max_id_bytes = 256;      // any external id
};

class RankerService final : public plumb::v1::Ranker::Service {
 public:
  // All pointers are borrowed and must outlive the service. exposure and metrics may be
  // null. Thread-safe: gRPC calls the methods concurrently from its pool.
  RankerService(const SnapshotHolder* holder, const Scorer* scorer, RankerLimits limits,
                ExposureSink* exposure, ServingMetrics* metrics);

  // Valid calls wait for a slot in `queue` (borrowed, may be null: no limit) before they
  // score. Call before the server starts.
  void set_admission(AdmissionQueue* queue) { admission_ = queue; }

  // Every call must carry this bearer token (borrowed, may be null: no token); calls
  // without it get UNAUTHENTICATED before anything else is looked at. Call before the
  // server starts.
  void set_auth(const rpc::BearerAuth* auth) { auth_ = auth; }

  // Status codes: UNAUTHENTICATED (a token is required and missing or wrong),
  // INVALID_ARGUMENT (a field out of its limits), UNAVAILABLE (no version
  // loaded yet), NOT_FOUND (unknown user or item, see ranker.proto), DEADLINE_EXCEEDED
  // (the call's deadline passed while it waited for a slot or while scoring),
  // RESOURCE_EXHAUSTED (every slot taken and the waiting line full), FAILED_PRECONDITION
  // (SimilarItems for an item with a zero vector), INTERNAL (a bug). A request that cannot be
  // decoded (e.g. a string field holding invalid UTF-8) gets INVALID_ARGUMENT naming the
  // field before any of these run (see rpc/checked_methods.h), and is counted like any other
  // call.
  grpc::Status Recommend(grpc::ServerContext* context, const plumb::v1::RecommendRequest* request,
                         plumb::v1::RecommendResponse* response) override;
  grpc::Status RankCandidates(grpc::ServerContext* context,
                              const plumb::v1::RankCandidatesRequest* request,
                              plumb::v1::RankCandidatesResponse* response) override;
  grpc::Status SimilarItems(grpc::ServerContext* context,
                            const plumb::v1::SimilarItemsRequest* request,
                            plumb::v1::SimilarItemsResponse* response) override;

 private:
  void Finish(RankerMethod method, const grpc::Status& status,
              std::chrono::steady_clock::time_point start) const;
  void RecordExposure(const Snapshot& snap, std::span<const ScoredIndex> items) const;
  // OK with *ticket holding a slot, or the status to answer with (counted as a rejection).
  grpc::Status Admit(RankerMethod method, const grpc::ServerContext& context,
                     AdmissionQueue::Ticket* ticket);

  const SnapshotHolder* const holder_;
  const Scorer* const scorer_;
  const RankerLimits limits_;
  ExposureSink* const exposure_;
  ServingMetrics* const metrics_;
  AdmissionQueue* admission_ = nullptr;
  const rpc::BearerAuth* auth_ = nullptr;
};

}  // namespace plumb::server
