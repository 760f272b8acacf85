// TrainSettings: the training choices as plumb's programs take them (the objective and the
// optimiser by name, numbers as given), and the one mapping from them to the fit loop's
// TrainOptions. `plumb fit`, `plumb tune`, `plumb eval`'s refits and plumb-train's online loop
// all go through MakeTrainOptions, so a choice means the same wherever it is made.
#pragma once

#include <cstdint>
#include <string>

#include "core/status.h"
#include "trainer/trainer.h"

namespace plumb::trainer {

struct TrainSettings {
  std::string objective = "cpr";      // cpr | bpr | bce
  std::string optimizer = "adagrad";  // sgd | adagrad
  uint32_t cpr_k = 2;                 // CPR sample size
  double cpr_k3_share = 0.0;          // share of samples of size kCprMixK mixed into CPR batches
  double beta = kDefaultBeta;         // dynamic sampling: candidates drawn per kept sample
  double learning_rate = 0.05;
  double l2 = 1e-4;
  uint32_t batch_size = 1024;  // samples per mini-batch
  uint32_t threads = 1;        // compute threads of a whole fit
  uint64_t seed = 1;
};

// Fills *out from `settings`: the objective and optimiser parsed, the rest copied (the CPR mix
// at size kCprMixK), then checked by ValidateTrainOptions. InvalidArgument naming the
// offending setting; *out is unchanged on error.
Status MakeTrainOptions(const TrainSettings& settings, TrainOptions* out);

}  // namespace plumb::trainer
