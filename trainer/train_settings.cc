#include "trainer/train_settings.h"

#include "trainer/objective.h"
#include "trainer/optimizer.h"

namespace plumb::trainer {

Status MakeTrainOptions(const TrainSettings& settings, TrainOptions* out) {
  TrainOptions t;
  PLUMB_RETURN_IF_ERROR(ParseObjectiveKind(settings.objective, &t.objective));
  PLUMB_RETURN_IF_ERROR(ParseOptimizerKind(settings.optimizer, &t.optimizer));
  t.cpr_k = settings.cpr_k;
  t.cpr_mix_k = kCprMixK;
  t.cpr_mix_share = settings.cpr_k3_share;
  t.beta = settings.beta;
  t.learning_rate = static_cast<float>(settings.learning_rate);
  t.l2 = static_cast<float>(settings.l2);
  t.batch_size = settings.batch_size;
  t.threads = settings.threads;
  t.seed = settings.seed;
  PLUMB_RETURN_IF_ERROR(ValidateTrainOptions(t));
  *out = t;
  return Status::Ok();
}

}  // namespace plumb::trainer
