// Offline ranking metrics and popularity statistics for debiased evaluation (DESIGN.md §2).
//
// Conventions shared by every function here:
// - Items are dense indices 0..n_items-1. Popularity ("degree") of an item is its number of
//   training interactions, passed as a span indexed by item.
// - A ranked list is best first; only its first k entries count, and a list shorter than k
//   simply has fewer hits (missing slots are misses). Entries of one list must be distinct.
// - A relevant set (a user's held-out test items) is sorted ascending without duplicates.
// All functions are pure and thread-safe; those returning std::vector allocate the result.
#pragma once

#include <cstddef>
#include <cstdint>
#include <span>
#include <vector>

#include "core/status.h"

namespace plumb {

// Many variable-length item lists (one per user) in one flat buffer: entry u is
// items[offsets[u], offsets[u + 1]). Used for per-user top-K lists and per-user relevant
// sets. Copyable value type; not thread-safe for concurrent Append.
class ItemLists {
 public:
  ItemLists() = default;

  // Appends one list (copied) as entry size(). Amortised O(list size).
  void Append(std::span<const uint32_t> list);
  void Reserve(std::size_t lists, std::size_t total_items);
  void Clear();

  std::size_t size() const { return offsets_.size() - 1; }
  std::size_t total_items() const { return items_.size(); }
  std::span<const uint32_t> operator[](std::size_t u) const {
    return {items_.data() + offsets_[u], offsets_[u + 1] - offsets_[u]};
  }

 private:
  std::vector<uint32_t> items_;
  std::vector<std::size_t> offsets_{0};
};

// ---- Per-user accuracy -------------------------------------------------------------------

// Recall@k = |top-k ∩ relevant| / |relevant|. We divide by the number of relevant test items,
// not by min(k, |relevant|): this is the common practice in the debiasing literature, and it
// means a user with more than k test items cannot reach 1. Returns 0 if relevant is empty
// (aggregates skip such users instead).
double recall_at_k(std::span<const uint32_t> ranked, std::span<const uint32_t> relevant,
                   std::size_t k);

// NDCG@k with binary gains (Järvelin & Kekäläinen, 2002):
// DCG = Σ_{rank r=1..k, hit} 1/log2(r+1), normalised by the ideal DCG, which places
// min(k, |relevant|) hits at ranks 1, 2, ...
// Range [0, 1]. Returns 0 if relevant is empty or k == 0.
double ndcg_at_k(std::span<const uint32_t> ranked, std::span<const uint32_t> relevant,
                 std::size_t k);

// ---- Popularity of recommendations -------------------------------------------------------

// Mean degree of the first k items of one list (0 for an empty list). Items must be
// < degrees.size() (checked only in debug builds; build_ranking_report validates).
double mean_popularity(std::span<const uint32_t> ranked, std::span<const uint64_t> degrees,
                       std::size_t k);

// ARP@k (Abdollahpouri et al., 2019): mean over lists of mean_popularity(list, degrees, k).
// Empty lists are skipped; 0 if every list is empty. Items must be < degrees.size().
double arp_at_k(const ItemLists& lists, std::span<const uint64_t> degrees, std::size_t k);

// Σ_i counts[i] * degrees[i] / Σ_i counts[i]: the mean degree of one served slot, given how
// often each item was served. Equals ARP when every list has the same length. 0 when no
// counts. Requires counts.size() == degrees.size() (shorter of the two is used otherwise).
double weighted_mean_popularity(std::span<const uint64_t> counts,
                                std::span<const uint64_t> degrees);

// ---- Exposure concentration -------------------------------------------------------------

// counts[i] = number of times item i appears among the first k entries of the lists, for
// i < n_items. Entries >= n_items are ignored (callers validate beforehand).
std::vector<uint64_t> exposure_counts(const ItemLists& lists, std::size_t n_items, std::size_t k);

// Gini coefficient of a count vector, by the sorted formula
//   G = Σ_{i=1..n} (2i − n − 1) x_(i) / (n Σ x),  x_(1) <= ... <= x_(n).
// 0 when all counts are equal; (n−1)/n when one of n items holds everything. 0 for an empty
// vector or an all-zero vector (no concentration to measure). Allocates a sorted copy.
double gini(std::span<const uint64_t> counts);

// Catalogue coverage: fraction of items with a non-zero count (0 for an empty vector).
double coverage(std::span<const uint64_t> counts);

// ---- Popularity groups -------------------------------------------------------------------

// Cuts the catalogue into num_groups popularity groups with about equal degree sums: items
// are sorted by degree ascending (ties by index) and walked in that order with a running sum
// C (including the current item); the item goes to group g = ceil(C · G / S) − 1, clamped to
// [0, G−1], where S is the total degree and G = num_groups. So group g collects the items
// whose running sum ends in ((g/G)·S, ((g+1)/G)·S], and group 0 holds the least popular
// items. A single item whose degree exceeds S/G spans several such intervals: it goes to the
// last of them and the others stay empty, so the most popular items always land in the top
// groups. If S == 0, every item is in group 0.
// On success (*group_of_item)[i] is item i's group. Errors: InvalidArgument if num_groups
// == 0 or group_of_item is null.
Status popularity_groups(std::span<const uint64_t> degrees, std::size_t num_groups,
                         std::vector<uint32_t>* group_of_item);

// Share of the total count that falls in each group: out[g] = Σ_{i in g} counts[i] / Σ counts.
// Used for recommended slots (counts from exposure_counts) and for test interactions
// (counts = number of test interactions per item). All zeros if Σ counts == 0. Items whose
// group is >= num_groups, or beyond group_of_item, are ignored.
std::vector<double> group_shares(std::span<const uint64_t> counts,
                                 std::span<const uint32_t> group_of_item, std::size_t num_groups);

// Jensen–Shannon divergence in bits (base-2 logarithms), range [0, 1]:
//   JS(P, Q) = ½ KL(P ‖ M) + ½ KL(Q ‖ M),  M = ½ (P + Q),  with 0 · log 0 = 0.
// p and q are non-negative weights, each normalised by its own sum first. 0 for identical
// distributions, 1 for distributions with disjoint support. Returns NaN (undefined) if the
// sizes differ, a weight is negative or not finite, or either sum is zero.
double js_divergence(std::span<const double> p, std::span<const double> q);

// Over- and under-correction: how far one distribution over popularity groups (e.g. served or
// recommended slots) sits toward the head or the tail of another (the target, e.g. the
// debiased validation split's or test's shares). Groups are ordered tail (0) to head (G-1).
//   shift    = (E_p[g] - E_q[g]) / (G - 1), in [-1, 1]: the difference of the mean group
//              index, as a share of the whole range. Positive: p leans toward the head more than
//              the target (under-corrected: popularity still pulls); negative: toward the tail
//              (over-corrected). 0 when the means agree.
//   distance = (1 / (G - 1)) Σ_{g<G-1} |P(g) - Q(g)|, P and Q the cumulative shares: the
//              earth mover's distance between the two over the ordered groups, in the same
//              unit, in [0, 1]. |shift| <= distance, with equality when the cumulative curves
//              do not cross (one is more head-heavy at every cut).
// The identity shift = (1 / (G-1)) Σ_g (Q(g) - P(g)) links the two (summation by parts).
// p and q are normalised by their own sums first. NaN for both when the sizes differ, G < 2,
// a weight is negative or not finite, or a sum is zero.
struct GroupShift {
  double shift = 0.0;
  double distance = 0.0;
};
GroupShift group_share_shift(std::span<const double> p, std::span<const double> q);

// ---- The evaluation report ---------------------------------------------------------------

// Aggregate figures at cut-off k over the evaluated users.
struct RankingReport {
  std::size_t k = 0;
  std::size_t users_evaluated = 0;        // users with at least one relevant test item
  double recall = 0.0;                    // mean recall_at_k over evaluated users
  double ndcg = 0.0;                      // mean ndcg_at_k over evaluated users
  double arp = 0.0;                       // ARP@k over the evaluated users' lists
  double gini = 0.0;                      // Gini of item exposure counts in those top-k lists
  double coverage = 0.0;                  // fraction of the catalogue in at least one of them
  std::vector<double> rec_group_shares;   // share of recommended slots per popularity group
  std::vector<double> test_group_shares;  // share of test interactions per popularity group
  double group_share_js = 0.0;  // js_divergence(rec_group_shares, test_group_shares); NaN if
                                // either is all zero
  // group_share_shift(rec_group_shares, test_group_shares): > 0 under-corrected (toward the
  // head), < 0 over-corrected (toward the tail); NaN as group_share_js.
  GroupShift group_shift;
};

// Builds the report from per-user top-k lists (top_k[u], best first, at least k long where
// the catalogue allows) and per-user relevant sets (relevant[u], sorted ascending, distinct),
// with training degrees indexed by item (degrees.size() is the catalogue size) and
// num_groups popularity groups built by popularity_groups(degrees, num_groups).
// Users whose relevant set is empty are skipped in every figure, as is common practice.
// Errors (InvalidArgument, *out unchanged): top_k.size() != relevant.size(); an item id >=
// degrees.size() in either; a relevant set not strictly ascending; k == 0; num_groups == 0;
// out null.
Status build_ranking_report(const ItemLists& top_k, const ItemLists& relevant,
                            std::span<const uint64_t> degrees, std::size_t k,
                            std::size_t num_groups, RankingReport* out);

}  // namespace plumb
