#include "trainer/tuner.h"

#include <chrono>
#include <cmath>
#include <cstdio>

namespace plumb::trainer {

std::vector<TuneCandidate> DefaultTuneCandidates() {
  return {{1.0, 0.0}, {2.0, 0.0}, {3.0, 0.0}, {5.0, 0.0}};
}

size_t ChooseCandidate(const ValidationSample& validation, double tie_standard_errors,
                       std::vector<TuneRow>* rows_in, std::string* reason) {
  std::vector<TuneRow>& rows = *rows_in;
  if (rows.empty()) return 0;
  size_t best = 0;
  for (size_t c = 1; c < rows.size(); ++c) {
    if (rows[c].scores.recall > rows[best].scores.recall) best = c;
  }
  size_t chosen = best;
  for (size_t c = 0; c < rows.size(); ++c) {
    TuneRow& row = rows[c];
    row.chosen = false;
    row.standard_error =
        c == best ? 0.0 : PairedStandardError(validation, rows[best].scores.hits, row.scores.hits);
    const double gap = rows[best].scores.recall - row.scores.recall;
    row.near_tie = c == best || gap <= tie_standard_errors * row.standard_error;
    if (!row.near_tie) continue;
    const double d = row.scores.shift.distance, dc = rows[chosen].scores.shift.distance;
    if (d < dc || (d == dc && row.scores.recall > rows[chosen].scores.recall)) chosen = c;
  }
  rows[chosen].chosen = true;
  if (reason != nullptr) {
    char buf[320];
    if (chosen == best) {
      std::snprintf(buf, sizeof buf, "beta %g has the best debiased validation recall (%.4f)%s",
                    rows[chosen].candidate.beta, rows[chosen].scores.recall,
                    rows.size() > 1 ? " and no near-tie is closer to the validation shares" : "");
    } else {
      std::snprintf(buf, sizeof buf,
                    "beta %g: its recall (%.4f) is within %g standard errors of the best (beta "
                    "%g, %.4f) and its group shares are closer to the validation split's "
                    "(distance %.3f vs %.3f)",
                    rows[chosen].candidate.beta, rows[chosen].scores.recall, tie_standard_errors,
                    rows[best].candidate.beta, rows[best].scores.recall,
                    rows[chosen].scores.shift.distance, rows[best].scores.shift.distance);
    }
    *reason = buf;
  }
  return chosen;
}

Status Tune(const Interactions& train, const ValidationSample& validation, const TrainOptions& base,
            std::span<const TuneCandidate> candidates, const TuneOptions& options,
            const TuneProgress& progress, TuneResult* out) {
  if (candidates.empty()) return Status::InvalidArgument("tune: no candidates to try");
  if (validation.weights.empty()) {
    return Status::FailedPrecondition(
        "tune: the validation sample is empty (hold out a share of the pairs first)");
  }
  TuneReport report;
  report.target_group_shares = ValidationGroupShares(validation, train, options.groups);
  std::vector<Embeddings> models(candidates.size());
  std::vector<std::unique_ptr<Optimizer>> optimizers(candidates.size());
  for (size_t c = 0; c < candidates.size(); ++c) {
    TrainOptions t = base;
    t.beta = candidates[c].beta;
    t.cpr_mix_share = candidates[c].cpr_mix_share;
    PLUMB_RETURN_IF_ERROR(ValidateTrainOptions(t));
    const auto started = std::chrono::steady_clock::now();
    PLUMB_RETURN_IF_ERROR(
        Embeddings::Create(options.dim, train.num_users(), train.num_items(), t.seed, &models[c]));
    std::unique_ptr<FitLoop> fit;
    PLUMB_RETURN_IF_ERROR(FitLoop::Create(t, &models[c], &train, &fit));
    PLUMB_RETURN_IF_ERROR(fit->RunEpochs(options.epochs));
    if (!models[c].AllFinite()) {
      return Status::Aborted("tune: the fit with beta " + std::to_string(t.beta) +
                             " diverged (non-finite values); try a smaller learning rate");
    }
    optimizers[c] = fit->ReleaseOptimizer();
    TuneRow row;
    row.candidate = candidates[c];
    PLUMB_RETURN_IF_ERROR(
        ScoreOnValidation(validation, models[c], train, options.k, options.groups, &row.scores));
    row.seconds = std::chrono::duration<double>(std::chrono::steady_clock::now() - started).count();
    report.rows.push_back(std::move(row));
    if (progress && !progress(report.rows.back(), models[c])) {
      return Status::Aborted("tune: stopped");
    }
  }

  report.chosen =
      ChooseCandidate(validation, options.tie_standard_errors, &report.rows, &report.reason);
  const size_t chosen = report.chosen;
  out->report = std::move(report);
  out->model = std::move(models[chosen]);
  out->optimizer = std::move(optimizers[chosen]);
  return Status::Ok();
}

}  // namespace plumb::trainer
