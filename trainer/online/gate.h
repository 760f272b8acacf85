// The publish gate: checks a candidate embedding version before it may be activated.
// A candidate passes when all its values are finite, no row norm exceeds a bound, and its
// debiased validation Recall@K is not below the active version's by more than a tolerance
// (beyond the noise of the comparison). Both are scored on the same pairs, so the comparison
// is paired, like for like.
//
// Debiased validation recall: every held-out pair (u, i) counts, weighted by 1 / pop(i)
// (pop = training degree, at least 1), i.e. the importance weight that turns the observed,
// exposure-biased pairs into an estimate for a uniform item distribution (the gamma = 1
// re-sampling of DESIGN.md section 2, done by weighting instead of by drawing). The figure
// is the weighted share of held-out pairs whose item is in the user's top K (training items
// excluded). Weighting keeps every pair, where re-sampling with keep probability 1/pop kept
// one pair in tens: with 2% of 120k events held out, re-sampling left 30-50 users and the
// comparison was noise (bench/quality runs saw a later, better refit fail against it).
//
// Noise: the gate uses the standard error of the paired weighted difference, with n the
// effective sample size of the weights (Kish 1965: (sum w)^2 / sum w^2), and fails only when
// the drop exceeds the tolerance by more than two standard errors. Below min_effective_pairs
// the comparison is skipped.
#pragma once

#include <cstdint>
#include <span>
#include <string>
#include <vector>

#include "core/metrics.h"
#include "store/store.h"
#include "trainer/embeddings.h"
#include "trainer/interactions.h"

namespace plumb::online {

class TrainingState;

// The users scored by the gate, their held-out items and each pair's weight.
struct GateSample {
  std::vector<uint32_t> users;
  ItemLists relevant;            // one sorted list per entry of users
  std::vector<double> weights;   // one per pair, in the order of the lists: 1 / pop(item)
  double effective_pairs = 0.0;  // Kish effective sample size of the weights
};

// The held-out validation pairs of `state`, grouped by user, each weighted 1 / pop(item);
// users without training pairs are left out; at most max_users users, chosen by a fixed
// hash of the user index (not the first indexes, which are the oldest users).
GateSample BuildGateSample(const TrainingState& state, size_t max_users);

// Whether each pair of the sample is a hit of `model` at k (its item among the user's top k
// of all the model's items, training items excluded), in sample order. Users or items
// outside the model are misses.
std::vector<uint8_t> GateHits(const GateSample& sample, const trainer::Embeddings& model,
                              const trainer::Interactions& train, uint32_t k);

// The weighted hit share of `hits` (debiased validation recall); NaN for an empty sample.
double GateRecall(const GateSample& sample, std::span<const uint8_t> hits);

struct GateOptions {
  uint32_t k = 20;
  double tolerance = 0.02;  // allowed absolute drop of validation Recall@k
  double max_row_norm = 100.0;
  // Below this effective sample size the comparison is skipped (not failed).
  double min_effective_pairs = 30.0;
};

struct GateVerdict {
  store::GateOutcome outcome = store::GateOutcome::kUnspecified;
  std::string reason;             // empty when passed
  double candidate_recall = 0.0;  // NaN when not measured
  double active_recall = 0.0;     // NaN when there is no active version
  double standard_error = 0.0;    // of candidate - active; NaN when not compared
  double effective_pairs = 0.0;
};

// `active` may be null (no version active yet: the outcome is then skipped, not failed,
// unless a value check fails). Thread-safe for const inputs.
GateVerdict JudgeCandidate(const trainer::Embeddings& candidate, const trainer::Embeddings* active,
                           const GateSample& sample, const trainer::Interactions& train,
                           const GateOptions& options);

}  // namespace plumb::online
