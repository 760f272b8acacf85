// Scorer: the ranking domain of plumb-serve. Answers Recommend, RankCandidates and
// SimilarItems for one snapshot, in external ids in and item indexes out; the gRPC service
// translates wire messages to these queries and the results back.
//
// Exact scoring: one blocked scan of the whole item matrix (core/scan.h) into a bounded
// top-K selector, skipping excluded rows; no approximation, no full sort. Recommend and
// SimilarItems read the snapshot's int8 copy first and compute exact float scores only for
// rows that might enter the top K (top_k_by_dot_pruned, top_k_by_cosine_pruned): the same
// answer as a full float scan for less than half the work.
// Large catalogues (Snapshot::dot_index() present): Recommend and SimilarItems ask the
// approximate index for candidates instead and score only those exactly; calls whose
// exclusions exceed the over-fetch bound, or that the index cannot fill, take the exact scan.
// Per-request scratch (selector, score block, exclusion lists, fold-in vector) is thread-local and
// reused, so a request on a warm thread allocates nothing on the scoring path.
#pragma once

#include <chrono>
#include <cstdint>
#include <span>
#include <string_view>
#include <vector>

#include "core/status.h"
#include "core/topk.h"
#include "server/fold_in.h"
#include "server/snapshot.h"
#include "server/withdrawn_items.h"

namespace plumb::server {

// What Recommend does for a user the snapshot does not know who brings no usable recent
// items (mirrors plumb.v1.UnknownUserPolicy).
enum class UnknownUserPolicy {
  kFail,            // NotFound naming the user id
  kMostInteracted,  // the items of highest training degree, marked as a fallback
};

using Deadline = std::chrono::system_clock::time_point;
inline constexpr Deadline kNoDeadline = Deadline::max();

struct RecommendQuery {
  std::string_view user_id;
  uint32_t count = 0;
  bool exclude_seen = true;  // the wire's default too (RecommendRequest.include_seen)
  std::span<const std::string_view> exclude_item_ids;  // unknown ids are ignored
  std::span<const std::string_view> recent_item_ids;   // used only for unknown users
  UnknownUserPolicy unknown_user = UnknownUserPolicy::kFail;
  Deadline deadline = kNoDeadline;
  const WithdrawnItems* withdrawn = nullptr;  // never returned (null: none)
};

struct CandidatesQuery {
  std::string_view user_id;
  std::span<const std::string_view> candidate_item_ids;
  std::span<const std::string_view> recent_item_ids;
  Deadline deadline = kNoDeadline;
  const WithdrawnItems* withdrawn = nullptr;  // reported, not scored (null: none)
};

struct SimilarQuery {
  std::string_view item_id;
  uint32_t count = 0;
  std::span<const std::string_view> exclude_item_ids;
  Deadline deadline = kNoDeadline;
  const WithdrawnItems* withdrawn = nullptr;  // never returned (null: none)
};

// A ranked answer. Reuse one per thread: the vectors keep their capacity between requests.
struct RankedList {
  // Best first (ranks_before: higher score, then smaller index). For the most-interacted
  // fallback the score is the item's training degree.
  std::vector<ScoredIndex> items;
  // RankCandidates: indexes into candidate_item_ids of the candidates the snapshot does not
  // know, first occurrence of each distinct id, in request order.
  std::vector<uint32_t> unknown_candidates;
  // RankCandidates: indexes into candidate_item_ids of the known candidates that are
  // withdrawn (query.withdrawn), first occurrence of each distinct id, in request order.
  std::vector<uint32_t> unavailable_candidates;
  uint64_t version = 0;
  bool folded_in = false;
  bool fallback = false;
  // Answered from the snapshot's approximate index (membership approximate, scores exact).
  bool approximate = false;
};

// How a Scorer uses a snapshot's approximate indexes (when the snapshot has them).
struct ApproxQueryOptions {
  // False: always the exact scan (benchmarks and checks compare the two on one snapshot).
  bool use_index = true;
  // The index's candidate list per search; 0: the breadth the index was built with.
  uint32_t search_breadth = 0;
};

class Scorer {
 public:
  explicit Scorer(FoldInOptions fold_in = {}, ApproxQueryOptions approx = {})
      : fold_in_(fold_in), approx_(approx) {}

  // All three methods: thread-safe (scratch is per thread), allocate nothing in steady
  // state apart from growing *out the first time a thread sees a larger answer. The query's
  // spans are only read during the call. They expect validated queries (sizes within the
  // service's limits, non-empty ids). Errors common to all:
  //   Aborted      the deadline passed before scoring finished (nothing in *out is valid);
  //   NotFound     the user / item is not known to the snapshot (message names the id).

  // Top `count` items for a user by dot product. A known user uses the stored vector and,
  // with exclude_seen, skips their seen items; recent_item_ids are then ignored. An
  // unknown user with known recent items is folded in, and those items are skipped. Request
  // exclusions are always skipped.
  Status Recommend(const Snapshot& snap, const RecommendQuery& query, RankedList* out) const;

  // Scores the known candidates (each distinct one once) for a known or folded-in user, best
  // first; unknown candidates are reported in out->unknown_candidates, withdrawn ones in
  // out->unavailable_candidates.
  Status RankCandidates(const Snapshot& snap, const CandidatesQuery& query, RankedList* out) const;

  // Top `count` items by cosine similarity to a known item, never the item itself nor a
  // withdrawn item (the query item may be withdrawn).
  // FailedPrecondition if the item's vector is zero (cosine undefined).
  Status SimilarItems(const Snapshot& snap, const SimilarQuery& query, RankedList* out) const;

 private:
  const FoldInOptions fold_in_;
  const ApproxQueryOptions approx_;
};

}  // namespace plumb::server
