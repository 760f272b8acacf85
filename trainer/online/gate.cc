#include "trainer/online/gate.h"

#include <algorithm>
#include <cmath>
#include <cstdio>

#include "core/scan.h"
#include "core/topk.h"
#include "trainer/online/training_state.h"

namespace plumb::online {

GateSample BuildGateSample(const TrainingState& state, size_t max_users) {
  return trainer::BuildValidationSample(state.train(), state.validation(), max_users);
}

GateVerdict JudgeCandidate(const trainer::Embeddings& candidate, const trainer::Embeddings* active,
                           const GateSample& sample, const trainer::Interactions& train,
                           const GateOptions& options) {
  GateVerdict v;
  v.candidate_recall = std::nan("");
  v.active_recall = std::nan("");
  v.standard_error = std::nan("");
  v.effective_pairs = sample.effective_pairs;
  if (!candidate.AllFinite()) {
    v.outcome = store::GateOutcome::kFailed;
    v.reason = "non-finite values in the embeddings";
    return v;
  }
  const float max_norm = candidate.MaxRowNorm();
  if (max_norm > options.max_row_norm) {
    v.outcome = store::GateOutcome::kFailed;
    v.reason = "a row norm of " + std::to_string(max_norm) + " exceeds the bound " +
               std::to_string(options.max_row_norm);
    return v;
  }
  if (sample.weights.empty()) {
    v.outcome = store::GateOutcome::kSkipped;
    v.reason = "no validation data yet";
    return v;
  }
  trainer::ValidationScores cand;
  if (Status s =
          trainer::ScoreOnValidation(sample, candidate, train, options.k, options.groups, &cand);
      !s.ok()) {
    v.outcome = store::GateOutcome::kFailed;
    v.reason = "validation failed: " + s.message();
    return v;
  }
  v.candidate_recall = cand.recall;
  v.candidate_group_shares = cand.group_shares;
  v.candidate_shift = cand.shift;
  v.target_group_shares = trainer::ValidationGroupShares(sample, train, options.groups);
  if (sample.effective_pairs < options.min_effective_pairs) {
    v.outcome = store::GateOutcome::kSkipped;
    v.reason = "validation sample has an effective size of " +
               std::to_string(static_cast<int>(sample.effective_pairs)) +
               " weighted pairs, fewer than " +
               std::to_string(static_cast<int>(options.min_effective_pairs)) + ": not compared";
    return v;
  }
  if (!active) {
    v.outcome = store::GateOutcome::kSkipped;
    v.reason = "no active version to compare with";
    return v;
  }
  trainer::ValidationScores act;
  if (Status s =
          trainer::ScoreOnValidation(sample, *active, train, options.k, options.groups, &act);
      !s.ok()) {
    v.outcome = store::GateOutcome::kFailed;
    v.reason = "validation of the active version failed: " + s.message();
    return v;
  }
  v.active_recall = act.recall;
  v.standard_error = trainer::PairedStandardError(sample, cand.hits, act.hits);
  const double drop = v.active_recall - v.candidate_recall;
  if (drop - 2.0 * v.standard_error > options.tolerance) {
    v.outcome = store::GateOutcome::kFailed;
    char buf[256];
    std::snprintf(buf, sizeof buf,
                  "validation recall@%u %.4f is below the active version's %.4f by more than "
                  "%.4f (plus two standard errors of %.4f)",
                  options.k, v.candidate_recall, v.active_recall, options.tolerance,
                  v.standard_error);
    v.reason = buf;
  } else {
    v.outcome = store::GateOutcome::kPassed;
  }
  return v;
}

}  // namespace plumb::online
