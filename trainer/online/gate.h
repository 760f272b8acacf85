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

#include <cmath>
#include <cstdint>
#include <span>
#include <string>
#include <vector>

#include "core/metrics.h"
#include "store/store.h"
#include "trainer/embeddings.h"
#include "trainer/interactions.h"
#include "trainer/validation.h"

namespace plumb::online {

class TrainingState;

// The gate's sample is a debiased validation sample (trainer/validation.h).
using GateSample = trainer::ValidationSample;

// The held-out validation pairs of `state` as a validation sample (at most max_users users).
GateSample BuildGateSample(const TrainingState& state, size_t max_users);

struct GateOptions {
  uint32_t k = 20;
  double tolerance = 0.02;  // allowed absolute drop of validation Recall@k
  double max_row_norm = 100.0;
  // Below this effective sample size the comparison is skipped (not failed).
  double min_effective_pairs = 30.0;
  size_t groups = 5;  // popularity groups of the over/under-correction figures
};

struct GateVerdict {
  store::GateOutcome outcome = store::GateOutcome::kUnspecified;
  std::string reason;             // empty when passed
  double candidate_recall = 0.0;  // NaN when not measured
  double active_recall = 0.0;     // NaN when there is no active version
  double standard_error = 0.0;    // of candidate - active; NaN when not compared
  double effective_pairs = 0.0;
  // Over/under-correction of the candidate on the validation users (trainer/validation.h);
  // empty / NaN when not measured.
  std::vector<double> target_group_shares;
  std::vector<double> candidate_group_shares;
  GroupShift candidate_shift{std::nan(""), std::nan("")};
};

// `active` may be null (no version active yet: the outcome is then skipped, not failed,
// unless a value check fails). Thread-safe for const inputs.
GateVerdict JudgeCandidate(const trainer::Embeddings& candidate, const trainer::Embeddings* active,
                           const GateSample& sample, const trainer::Interactions& train,
                           const GateOptions& options);

}  // namespace plumb::online
