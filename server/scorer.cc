#include "server/scorer.h"

#include <algorithm>
#include <cmath>
#include <string>
#include <utility>

#include "core/scan.h"

namespace plumb::server {

namespace {

// Per-thread reusable storage. gRPC's sync server runs each request on one pool thread from
// start to end, so a thread_local is private to the request for its duration.
struct Scratch {
  TopKSelector selector;
  std::vector<float> block = std::vector<float>(kDefaultScanBlockRows);
  std::vector<uint32_t> request_rows;  // resolved exclude_item_ids
  std::vector<uint32_t> recent_rows;   // resolved recent_item_ids
  std::vector<uint32_t> merged;        // union of two exclusion lists
  std::vector<uint32_t> candidate_rows;
  std::vector<float> scores;
  std::vector<float> user;                                     // a folded-in user vector
  std::vector<float> approx_query;                             // the index's form of a query
  std::vector<uint32_t> approx_rows;                           // the index's candidates
  std::vector<std::pair<std::string_view, uint32_t>> unknown;  // (id, request position)
  std::vector<std::pair<std::string_view, uint32_t>> unavailable;
  std::vector<uint32_t> withdrawn_rows;
};

// The withdrawn items of `snap` as a bitmap when the set was built for it; otherwise (the
// instant after a swap) their rows are added to *rows (ascending, as ResolveItems leaves it).
std::span<const uint64_t> WithdrawnExclusions(const Snapshot& snap, const WithdrawnItems* withdrawn,
                                              std::vector<uint32_t>* scratch,
                                              std::vector<uint32_t>* rows) {
  if (withdrawn == nullptr || withdrawn->empty()) return {};
  if (withdrawn->BuiltFor(snap.version())) return withdrawn->bitmap();
  withdrawn->ResolveRows(snap, scratch);
  if (!scratch->empty()) {
    rows->insert(rows->end(), scratch->begin(), scratch->end());
    std::sort(rows->begin(), rows->end());
  }
  return {};
}

bool InBitmap(std::span<const uint64_t> bitmap, uint32_t row) {
  return row / 64 < bitmap.size() && ((bitmap[row / 64] >> (row % 64)) & 1) != 0;
}

Scratch& ThreadScratch() {
  thread_local Scratch scratch;
  return scratch;
}

// The sorted, distinct item indexes of the ids the snapshot knows; unknown ids are dropped.
void ResolveItems(const Snapshot& snap, std::span<const std::string_view> ids,
                  std::vector<uint32_t>* rows) {
  rows->clear();
  for (std::string_view id : ids) {
    if (std::optional<uint32_t> row = snap.FindItem(id)) rows->push_back(*row);
  }
  std::sort(rows->begin(), rows->end());
  rows->erase(std::unique(rows->begin(), rows->end()), rows->end());
}

// The union of two ascending lists, as a span into one of them or into *merged.
std::span<const uint32_t> Union(std::span<const uint32_t> a, std::span<const uint32_t> b,
                                std::vector<uint32_t>* merged) {
  if (a.empty()) return b;
  if (b.empty()) return a;
  merged->resize(a.size() + b.size());
  std::merge(a.begin(), a.end(), b.begin(), b.end(), merged->begin());
  return *merged;  // duplicates are allowed in Exclusions::sorted_rows
}

bool Passed(Deadline deadline) {
  return deadline != kNoDeadline && std::chrono::system_clock::now() >= deadline;
}

Status DeadlinePassed(size_t scanned, size_t total) {
  return Status::Aborted("deadline passed after scoring " + std::to_string(scanned) + " of " +
                         std::to_string(total) + " items");
}

std::string Quoted(std::string_view id) {
  // Appended piecewise: GCC 12 reports a false -Wrestrict on "'" + std::string + "'".
  std::string quoted;
  quoted.reserve(id.size() + 2);
  quoted.push_back('\'');
  quoted.append(id);
  quoted.push_back('\'');
  return quoted;
}

std::string UnknownUserMessage(const Snapshot& snap, std::string_view user_id,
                               size_t recent_given) {
  std::string msg = "user_id " + Quoted(user_id) + " is not known to model version " +
                    std::to_string(snap.version());
  if (recent_given > 0) {
    msg += " and none of its " + std::to_string(recent_given) + " recent_item_ids are";
  } else {
    msg += " and the request has no recent_item_ids to fold in";
  }
  return msg;
}

// The `count` best rows by the approximate index: the index proposes count + |excluded| +
// bitmap_bound candidates (bitmap_bound: at most that many rows are set in excluded_bitmap,
// the withdrawn items), excluded ones are dropped, and the survivors are scored exactly (dot
// product, or cosine when `norms` is given: the same expression as the exact scan's). False
// when the exact scan must answer instead: no index (or the Scorer told not to use it), more
// exclusions than the snapshot's over-fetch bound, or fewer than `count` survivors while the
// catalogue holds more eligible items.
bool ApproxTopK(const Snapshot& snap, const ApproxIndex* index, const ApproxQueryOptions& how,
                std::span<const float> query, std::span<const float> norms, uint32_t count,
                std::span<const uint64_t> excluded_bitmap, size_t bitmap_bound,
                std::span<const uint32_t> excluded, Scratch& s, RankedList* out) {
  const size_t overfetch = excluded.size() + bitmap_bound;
  if (index == nullptr || !how.use_index || count == 0 || overfetch > snap.max_overfetch()) {
    return false;
  }
  s.approx_rows.clear();
  index->Search(query, count + static_cast<uint32_t>(overfetch), how.search_breadth,
                &s.approx_query, &s.approx_rows);
  std::sort(s.approx_rows.begin(), s.approx_rows.end());
  std::erase_if(s.approx_rows, [excluded, excluded_bitmap](uint32_t row) {
    return InBitmap(excluded_bitmap, row) ||
           std::binary_search(excluded.begin(), excluded.end(), row);
  });
  s.scores.resize(s.approx_rows.size());
  if (!gather_dot_scores(snap.items(), s.approx_rows, query, s.scores).ok()) return false;
  float inv_query_norm = 1.0f;
  if (!norms.empty()) {
    double qq = 0.0;
    for (float v : query) qq += double{v} * double{v};
    inv_query_norm = static_cast<float>(1.0 / std::sqrt(qq));  // the query's norm is not 0
  }
  s.selector.Reset(count);
  for (size_t j = 0; j < s.approx_rows.size(); ++j) {
    const uint32_t row = s.approx_rows[j];
    float score = s.scores[j];
    if (!norms.empty()) score = norms[row] > 0.0f ? score * inv_query_norm / norms[row] : 0.0f;
    s.selector.Push(row, score);
  }
  if (s.selector.size() < count && s.approx_rows.size() + overfetch < snap.num_items()) {
    return false;  // the exclusions ate into the answer: let the exact scan fill it
  }
  std::span<const ScoredIndex> best = s.selector.SortedResult();
  out->items.assign(best.begin(), best.end());
  out->approximate = true;
  return true;
}

// The `count` best rows of the whole item matrix by dot product with `user`: the pruned exact
// scan (int8 estimates first, exact float scores where they can matter; same answer as a full
// float scan, see core/scan.h).
Status ScanTopK(const Snapshot& snap, const ApproxQueryOptions& how, std::span<const float> user,
                uint32_t count, std::span<const uint64_t> excluded_bitmap, size_t bitmap_bound,
                std::span<const uint32_t> excluded, Deadline deadline, Scratch& s,
                RankedList* out) {
  if (ApproxTopK(snap, snap.dot_index(), how, user, {}, count, excluded_bitmap, bitmap_bound,
                 excluded, s, out)) {
    if (Passed(deadline)) return DeadlinePassed(snap.num_items(), snap.num_items());
    return Status::Ok();
  }
  s.selector.Reset(count);
  ScanOutcome outcome;
  auto past_deadline = [deadline] { return std::chrono::system_clock::now() >= deadline; };
  StopCheck stop;
  if (deadline != kNoDeadline) stop = past_deadline;
  PLUMB_RETURN_IF_ERROR(top_k_by_dot_pruned(snap.items(), snap.item_codes(), user,
                                            Exclusions{excluded_bitmap, excluded}, s.block,
                                            &s.selector, &outcome, stop));
  if (outcome.stopped_early) return DeadlinePassed(outcome.rows_scanned, snap.num_items());
  std::span<const ScoredIndex> best = s.selector.SortedResult();
  out->items.assign(best.begin(), best.end());
  return Status::Ok();
}

void Clear(const Snapshot& snap, RankedList* out) {
  out->items.clear();
  out->unknown_candidates.clear();
  out->unavailable_candidates.clear();
  out->version = snap.version();
  out->folded_in = false;
  out->fallback = false;
  out->approximate = false;
}

}  // namespace

Status Scorer::Recommend(const Snapshot& snap, const RecommendQuery& query, RankedList* out) const {
  Clear(snap, out);
  if (Passed(query.deadline)) return DeadlinePassed(0, snap.num_items());
  Scratch& s = ThreadScratch();
  ResolveItems(snap, query.exclude_item_ids, &s.request_rows);
  const std::span<const uint64_t> withdrawn =
      WithdrawnExclusions(snap, query.withdrawn, &s.withdrawn_rows, &s.request_rows);

  std::span<const float> user;
  std::span<const uint32_t> user_exclusions;
  if (std::optional<uint32_t> u = snap.FindUser(query.user_id)) {
    user = snap.user_vector(*u);
    if (query.exclude_seen) user_exclusions = snap.seen_items(*u);
  } else {
    ResolveItems(snap, query.recent_item_ids, &s.recent_rows);
    if (!s.recent_rows.empty()) {
      s.user.resize(snap.dim());
      PLUMB_RETURN_IF_ERROR(
          fold_in_user(snap.items(), snap.item_gram(), s.recent_rows, fold_in_, s.user));
      user = s.user;
      // What the user just interacted with is not worth recommending back.
      user_exclusions = s.recent_rows;
      out->folded_in = true;
    } else if (query.unknown_user == UnknownUserPolicy::kMostInteracted) {
      for (uint32_t item : snap.items_by_degree()) {
        if (out->items.size() >= query.count) break;
        if (std::binary_search(s.request_rows.begin(), s.request_rows.end(), item)) continue;
        if (InBitmap(withdrawn, item)) continue;
        out->items.push_back(ScoredIndex{item, static_cast<float>(snap.item_degrees()[item])});
      }
      out->fallback = true;
      return Status::Ok();
    } else {
      return Status::NotFound(
          UnknownUserMessage(snap, query.user_id, query.recent_item_ids.size()));
    }
  }
  return ScanTopK(snap, approx_, user, query.count, withdrawn,
                  withdrawn.empty() ? 0 : query.withdrawn->size(),
                  Union(user_exclusions, s.request_rows, &s.merged), query.deadline, s, out);
}

Status Scorer::RankCandidates(const Snapshot& snap, const CandidatesQuery& query,
                              RankedList* out) const {
  Clear(snap, out);
  if (Passed(query.deadline)) return DeadlinePassed(0, query.candidate_item_ids.size());
  Scratch& s = ThreadScratch();

  std::span<const float> user;
  if (std::optional<uint32_t> u = snap.FindUser(query.user_id)) {
    user = snap.user_vector(*u);
  } else {
    ResolveItems(snap, query.recent_item_ids, &s.recent_rows);
    if (s.recent_rows.empty()) {
      return Status::NotFound(
          UnknownUserMessage(snap, query.user_id, query.recent_item_ids.size()));
    }
    s.user.resize(snap.dim());
    PLUMB_RETURN_IF_ERROR(
        fold_in_user(snap.items(), snap.item_gram(), s.recent_rows, fold_in_, s.user));
    user = s.user;
    out->folded_in = true;
  }

  s.candidate_rows.clear();
  s.unknown.clear();
  s.unavailable.clear();
  const bool any_withdrawn = query.withdrawn != nullptr && !query.withdrawn->empty();
  for (uint32_t j = 0; j < query.candidate_item_ids.size(); ++j) {
    const std::string_view id = query.candidate_item_ids[j];
    if (std::optional<uint32_t> row = snap.FindItem(id)) {
      if (any_withdrawn && query.withdrawn->Contains(id)) {
        s.unavailable.emplace_back(id, j);
      } else {
        s.candidate_rows.push_back(*row);
      }
    } else {
      s.unknown.emplace_back(id, j);
    }
  }
  std::sort(s.candidate_rows.begin(), s.candidate_rows.end());
  s.candidate_rows.erase(std::unique(s.candidate_rows.begin(), s.candidate_rows.end()),
                         s.candidate_rows.end());
  // Unknown ids: keep the first occurrence of each, then restore request order.
  std::sort(s.unknown.begin(), s.unknown.end());
  for (size_t j = 0; j < s.unknown.size(); ++j) {
    if (j == 0 || s.unknown[j].first != s.unknown[j - 1].first) {
      out->unknown_candidates.push_back(s.unknown[j].second);
    }
  }
  std::sort(out->unknown_candidates.begin(), out->unknown_candidates.end());
  std::sort(s.unavailable.begin(), s.unavailable.end());
  for (size_t j = 0; j < s.unavailable.size(); ++j) {
    if (j == 0 || s.unavailable[j].first != s.unavailable[j - 1].first) {
      out->unavailable_candidates.push_back(s.unavailable[j].second);
    }
  }
  std::sort(out->unavailable_candidates.begin(), out->unavailable_candidates.end());

  s.scores.resize(s.candidate_rows.size());
  PLUMB_RETURN_IF_ERROR(gather_dot_scores(snap.items(), s.candidate_rows, user, s.scores));
  for (size_t j = 0; j < s.candidate_rows.size(); ++j) {
    out->items.push_back(ScoredIndex{s.candidate_rows[j], s.scores[j]});
  }
  std::sort(out->items.begin(), out->items.end(), ranks_before);
  return Status::Ok();
}

Status Scorer::SimilarItems(const Snapshot& snap, const SimilarQuery& query,
                            RankedList* out) const {
  Clear(snap, out);
  if (Passed(query.deadline)) return DeadlinePassed(0, snap.num_items());
  std::optional<uint32_t> item = snap.FindItem(query.item_id);
  if (!item) {
    return Status::NotFound("item_id " + Quoted(query.item_id) + " is not known to model version " +
                            std::to_string(snap.version()));
  }
  if (snap.item_norms()[*item] == 0.0f) {
    return Status::FailedPrecondition(
        "item_id " + Quoted(query.item_id) + " has a zero embedding in model version " +
        std::to_string(snap.version()) + "; cosine similarity to it is undefined");
  }
  Scratch& s = ThreadScratch();
  ResolveItems(snap, query.exclude_item_ids, &s.request_rows);
  const std::span<const uint64_t> withdrawn =
      WithdrawnExclusions(snap, query.withdrawn, &s.withdrawn_rows, &s.request_rows);
  const uint32_t self[1] = {*item};
  std::span<const uint32_t> excluded = Union(self, s.request_rows, &s.merged);
  if (ApproxTopK(snap, snap.cosine_index(), approx_, snap.item_vector(*item), snap.item_norms(),
                 query.count, withdrawn, withdrawn.empty() ? 0 : query.withdrawn->size(), excluded,
                 s, out)) {
    if (Passed(query.deadline)) return DeadlinePassed(snap.num_items(), snap.num_items());
    return Status::Ok();
  }

  s.selector.Reset(query.count);
  ScanOutcome outcome;
  auto past_deadline = [deadline = query.deadline] {
    return std::chrono::system_clock::now() >= deadline;
  };
  StopCheck stop;
  if (query.deadline != kNoDeadline) stop = past_deadline;
  PLUMB_RETURN_IF_ERROR(top_k_by_cosine_pruned(
      snap.items(), snap.item_codes(), snap.item_norms(), snap.item_vector(*item),
      Exclusions{withdrawn, excluded}, s.block, &s.selector, &outcome, stop));
  if (outcome.stopped_early) return DeadlinePassed(outcome.rows_scanned, snap.num_items());
  std::span<const ScoredIndex> best = s.selector.SortedResult();
  out->items.assign(best.begin(), best.end());
  return Status::Ok();
}

}  // namespace plumb::server
