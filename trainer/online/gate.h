// The publish gate: checks a candidate embedding version before it may be activated.
// A candidate passes when all its values are finite, no row norm exceeds a bound, and its
// Recall@K on the debiased validation sample is not below the active version's by more than
// a tolerance. Both are scored on the same sample, so the comparison is like for like.
#pragma once

#include <cstdint>
#include <string>
#include <vector>

#include "core/metrics.h"
#include "store/store.h"
#include "trainer/embeddings.h"
#include "trainer/interactions.h"

namespace plumb::online {

class TrainingState;

// The users scored by the gate and their held-out items.
struct GateSample {
  std::vector<uint32_t> users;
  ItemLists relevant;  // one sorted list per entry of users
};

// The held-out validation pairs of `state`, re-sampled with keep probability ∝ 1/pop
// (DESIGN.md §2, γ = 1, fixed seed) and grouped by user; users without training pairs are
// left out; at most max_users users.
GateSample BuildGateSample(const TrainingState& state, size_t max_users);

// Mean Recall@k over the sample's users, ranking all of `model`'s items with the user's
// training items excluded. Users or items outside the model count as misses. NaN for an
// empty sample.
double GateRecall(const GateSample& sample, const trainer::Embeddings& model,
                  const trainer::Interactions& train, uint32_t k);

struct GateOptions {
  uint32_t k = 20;
  double tolerance = 0.02;      // allowed absolute drop of Recall@k
  double max_row_norm = 100.0;
  // Below this many validation users the recall comparison is noise (one hit among a dozen
  // users moves recall by several points): the candidate is then not compared (skipped).
  size_t min_users = 50;
};

struct GateVerdict {
  store::GateOutcome outcome = store::GateOutcome::kUnspecified;
  std::string reason;               // empty when passed
  double candidate_recall = 0.0;    // NaN when not measured
  double active_recall = 0.0;       // NaN when there is no active version
};

// `active` may be null (no version active yet: the outcome is then skipped, not failed,
// unless a value check fails). Thread-safe for const inputs.
GateVerdict JudgeCandidate(const trainer::Embeddings& candidate,
                           const trainer::Embeddings* active, const GateSample& sample,
                           const trainer::Interactions& train, const GateOptions& options);

}  // namespace plumb::online
