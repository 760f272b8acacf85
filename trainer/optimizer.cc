#include "trainer/optimizer.h"

#include <cmath>
#include <new>
#include <string>

namespace plumb::trainer {

Status ParseOptimizerKind(std::string_view name, OptimizerKind* out) {
  if (name == "sgd") {
    *out = OptimizerKind::kSgd;
  } else if (name == "adagrad") {
    *out = OptimizerKind::kAdagrad;
  } else {
    return Status::InvalidArgument("unknown optimizer '" + std::string(name) +
                                   "' (expected sgd or adagrad)");
  }
  return Status::Ok();
}

std::string_view OptimizerName(OptimizerKind kind) {
  return kind == OptimizerKind::kSgd ? "sgd" : "adagrad";
}

Status AdagradOptimizer::Resize(const Embeddings& model) {
  const Eigen::Index cols = per_row_ ? 1 : model.dim();
  const Eigen::Index want[2] = {model.num_users(), model.num_items()};
  try {
    RowMatrix grown[2];
    for (int s = 0; s < 2; ++s) {
      if (acc_[s].rows() >= want[s] && acc_[s].cols() == cols) continue;
      grown[s].resize(want[s], cols);
      grown[s].setConstant(init_);
      if (acc_[s].cols() == cols) grown[s].topRows(acc_[s].rows()) = acc_[s];
    }
    for (int s = 0; s < 2; ++s) {
      if (grown[s].rows() > 0) acc_[s] = std::move(grown[s]);
    }
  } catch (const std::bad_alloc&) {
    return Status::ResourceExhausted("out of memory growing Adagrad accumulators");
  }
  return Status::Ok();
}

void AdagradOptimizer::Apply(Side side, uint32_t r, float* row, const float* grad, uint32_t dim) {
  RowMatrix& acc = acc_[static_cast<int>(side)];
  if (per_row_) {
    float sq = 0.0f;
    for (uint32_t j = 0; j < dim; ++j) sq += grad[j] * grad[j];
    float& a = acc(r, 0);
    a += sq / static_cast<float>(dim);
    const float step = lr_ / std::sqrt(a);
    for (uint32_t j = 0; j < dim; ++j) row[j] -= step * grad[j];
    return;
  }
  // Eigen array expressions: a scalar loop calling std::sqrt does not vectorise (errno
  // handling), Eigen's packet sqrt does; this is the hot loop of Adagrad training.
  Eigen::Map<Eigen::ArrayXf> a(acc.data() + static_cast<size_t>(r) * dim, dim);
  Eigen::Map<Eigen::ArrayXf> x(row, dim);
  Eigen::Map<const Eigen::ArrayXf> g(grad, dim);
  a += g.square();
  x -= lr_ * g / a.sqrt();
}

float AdagradOptimizer::accumulator(Side side, uint32_t r, uint32_t j) const {
  const RowMatrix& acc = acc_[static_cast<int>(side)];
  return per_row_ ? acc(r, 0) : acc(r, j);
}

Status MakeOptimizer(OptimizerKind kind, float learning_rate, std::unique_ptr<Optimizer>* out) {
  if (!std::isfinite(learning_rate) || learning_rate <= 0.0f) {
    return Status::InvalidArgument("learning rate must be finite and > 0");
  }
  if (kind == OptimizerKind::kSgd) {
    *out = std::make_unique<SgdOptimizer>(learning_rate);
  } else {
    *out = std::make_unique<AdagradOptimizer>(learning_rate);
  }
  return Status::Ok();
}

}  // namespace plumb::trainer
