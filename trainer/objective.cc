#include "trainer/objective.h"

#include <cmath>
#include <string>

namespace plumb::trainer {

Status ParseObjectiveKind(std::string_view name, ObjectiveKind* out) {
  if (name == "cpr") {
    *out = ObjectiveKind::kCpr;
  } else if (name == "bpr") {
    *out = ObjectiveKind::kBpr;
  } else if (name == "bce") {
    *out = ObjectiveKind::kBce;
  } else {
    return Status::InvalidArgument("unknown objective '" + std::string(name) +
                                   "' (expected cpr, bpr or bce)");
  }
  return Status::Ok();
}

std::string_view ObjectiveName(ObjectiveKind kind) {
  switch (kind) {
    case ObjectiveKind::kCpr:
      return "cpr";
    case ObjectiveKind::kBpr:
      return "bpr";
    case ObjectiveKind::kBce:
      return "bce";
  }
  return "unknown";
}

float LogSigmoid(float x) {
  // ln sigma(x) = min(x, 0) - ln(1 + e^{-|x|}): the exponent is never positive, so nothing
  // overflows, and log1p keeps precision when e^{-|x|} is tiny.
  return std::fmin(x, 0.0f) - std::log1p(std::exp(-std::fabs(x)));
}

float Sigmoid(float x) {
  if (x >= 0.0f) return 1.0f / (1.0f + std::exp(-x));
  const float e = std::exp(x);
  return e / (1.0f + e);
}

float Objective::Step(Embeddings* model, Optimizer* optimizer, const Sample& sample, float l2,
                      RowGradients* grads) const {
  const float loss = LossAndGradient(*model, sample, grads);
  const uint32_t dim = model->dim();
  for (uint32_t n = 0; n < grads->count(); ++n) {
    float* row = model->row(grads->side(n), grads->row(n));
    float* g = grads->grad(n);
    // L2 regularisation of the touched rows only: the gradient of (l2 / 2) |row|^2.
    if (l2 != 0.0f) {
      for (uint32_t j = 0; j < dim; ++j) g[j] += l2 * row[j];
    }
    optimizer->Apply(grads->side(n), grads->row(n), row, g, dim);
  }
  return loss;
}

std::unique_ptr<Objective> MakeObjective(ObjectiveKind kind) {
  switch (kind) {
    case ObjectiveKind::kCpr:
      return std::make_unique<CprObjective>();
    case ObjectiveKind::kBpr:
      return std::make_unique<BprObjective>();
    case ObjectiveKind::kBce:
      return std::make_unique<BceObjective>();
  }
  return nullptr;
}

}  // namespace plumb::trainer
