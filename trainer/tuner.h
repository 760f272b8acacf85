// Tuner: chooses how hard CPR pushes toward the long tail (the hard-sample factor beta, and
// optionally the share of k = 3 samples) from the data, on a debiased validation sample
// (trainer/validation.h), instead of one fixed value for every catalogue.
//
// Why: measured with plumb itself (README "Choosing the debiasing strength"), from 1 to 5 a
// higher beta pushes recommendations further into the tail, and 30 or 50 overshoot; beta = 3's
// ARP@20 was 1.00-1.03 x the true-relevance ranking's on mildly skewed worlds and 2.5-2.7 x on
// strongly skewed ones. Which beta is right depends on the data.
//
// How: every candidate is fitted from scratch on the same training pairs with the same
// configuration otherwise, and scored on the same validation sample. The pick is the best
// debiased validation Recall@K; a candidate whose recall is within one standard error of the
// paired difference to the best (two by default) is a near-tie (noise), and among near-ties the
// one whose recommended group shares are closest (earth mover's distance over the ordered
// groups) to the validation sample's own shares wins. That breaks ties toward the candidate that
// neither over- nor under-corrects.
//
// Thread safety: Tune is a pure function of its inputs; it runs options.threads threads.
#pragma once

#include <cstdint>
#include <functional>
#include <memory>
#include <span>
#include <string>
#include <vector>

#include "core/status.h"
#include "trainer/embeddings.h"
#include "trainer/interactions.h"
#include "trainer/optimizer.h"
#include "trainer/trainer.h"
#include "trainer/validation.h"

namespace plumb::trainer {

// One configuration to try: beta, and the share of k = 3 samples (CPR only).
struct TuneCandidate {
  double beta = 3.0;
  double cpr_mix_share = 0.0;
};

// beta in {1, 2, 3, 5}, no k-mix: the default search.
std::vector<TuneCandidate> DefaultTuneCandidates();

struct TuneOptions {
  uint32_t dim = 64;
  uint32_t epochs = 20;
  uint32_t k = 20;    // Recall@K on validation
  size_t groups = 5;  // popularity groups
  // Within this many standard errors of the paired difference to the best recall: a near-tie.
  // Two (a 95 % band for a normal difference) was measured best against ground truth on
  // synthetic worlds (bench/quality/tune_choice.py; README "Choosing the debiasing strength").
  double tie_standard_errors = 2.0;
};

struct TuneRow {
  TuneCandidate candidate;
  ValidationScores scores;
  double standard_error = 0.0;  // of (best - this) over the validation pairs; 0 for the best
  bool near_tie = false;        // within tie_standard_errors of the best recall
  bool chosen = false;
  double seconds = 0.0;
};

struct TuneReport {
  std::vector<TuneRow> rows;  // in candidate order
  size_t chosen = 0;
  std::vector<double> target_group_shares;  // the validation sample's own shares
  std::string reason;                       // why the chosen one, in a sentence
};

struct TuneResult {
  TuneReport report;
  Embeddings model;                      // the chosen candidate's fit
  std::unique_ptr<Optimizer> optimizer;  // its optimiser state, to continue training
};

// The choice among scored rows (each with scores.hits over `validation`): marks near_tie,
// standard_error and chosen on the rows and returns the chosen index; *reason (optional) says
// why in a sentence. Pure: the rule of the file comment, exposed for tests.
size_t ChooseCandidate(const ValidationSample& validation, double tie_standard_errors,
                       std::vector<TuneRow>* rows, std::string* reason);

// Called after each candidate with its row and its fitted model; return false to stop (Tune
// then returns Aborted).
using TuneProgress = std::function<bool(const TuneRow&, const Embeddings&)>;

// Fits every candidate (base with the candidate's beta and k-mix share) on `train` and picks
// one as described above. Errors: InvalidArgument for no candidates or bad options (as
// ValidateTrainOptions); FailedPrecondition when the validation sample is empty; the fit's
// errors; Aborted when progress returns false or a fit diverges.
Status Tune(const Interactions& train, const ValidationSample& validation, const TrainOptions& base,
            std::span<const TuneCandidate> candidates, const TuneOptions& options,
            const TuneProgress& progress, TuneResult* out);

}  // namespace plumb::trainer
