// Optimisers: turn the gradient of one touched row into an update of that row. Only rows a
// sample touches are updated (sparse SGD), so an optimiser works row by row and keeps any
// per-row state (Adagrad accumulators) in matrices shaped like the model.
#pragma once

#include <cstdint>
#include <memory>
#include <string_view>

#include "core/status.h"
#include "trainer/embeddings.h"

namespace plumb::trainer {

enum class OptimizerKind : uint8_t { kSgd, kAdagrad };

// "sgd" | "adagrad". Errors: InvalidArgument naming the accepted values.
Status ParseOptimizerKind(std::string_view name, OptimizerKind* out);
std::string_view OptimizerName(OptimizerKind kind);

// Interface. Apply may be called concurrently from several training threads on the same or
// different rows (Hogwild-style, see trainer.h): implementations keep no shared mutable
// state other than the per-row state of the row being updated. Resize must not run
// concurrently with anything.
class Optimizer {
 public:
  virtual ~Optimizer() = default;

  // Grows per-row state to cover every row of `model` (existing state is kept).
  // Errors: ResourceExhausted when memory runs out.
  virtual Status Resize(const Embeddings& model) = 0;

  // row -= update(grad) for row `r` of `side`; `row` points at that row's dim values and
  // `grad` at dim gradient values (loss gradient plus regularisation).
  virtual void Apply(Side side, uint32_t r, float* row, const float* grad, uint32_t dim) = 0;

  virtual OptimizerKind kind() const = 0;
  virtual float learning_rate() const = 0;
};

// Plain stochastic gradient descent: row -= lr * grad.
class SgdOptimizer final : public Optimizer {
 public:
  explicit SgdOptimizer(float learning_rate) : lr_(learning_rate) {}
  Status Resize(const Embeddings&) override { return Status::Ok(); }
  void Apply(Side, uint32_t, float* row, const float* grad, uint32_t dim) override {
    for (uint32_t j = 0; j < dim; ++j) row[j] -= lr_ * grad[j];
  }
  OptimizerKind kind() const override { return OptimizerKind::kSgd; }
  float learning_rate() const override { return lr_; }

 private:
  float lr_;
};

// Adagrad (Duchi, Hazan & Singer, 2011): per coordinate, G += g^2 and
// x -= lr * g / sqrt(G). Accumulators start at initial_accumulator (0.1, the default of
// common implementations — from memory), which bounds the first steps at lr * |g| / sqrt(0.1).
// With per_row = true one accumulator per row holds the mean of g^2 over the row's
// coordinates (dim times less memory; a common variant for embedding tables).
class AdagradOptimizer final : public Optimizer {
 public:
  AdagradOptimizer(float learning_rate, bool per_row = false, float initial_accumulator = 0.1f)
      : lr_(learning_rate), per_row_(per_row), init_(initial_accumulator) {}
  Status Resize(const Embeddings& model) override;
  void Apply(Side side, uint32_t r, float* row, const float* grad, uint32_t dim) override;
  OptimizerKind kind() const override { return OptimizerKind::kAdagrad; }
  float learning_rate() const override { return lr_; }
  bool per_row() const { return per_row_; }

  // Accumulator of coordinate j of a row (per-row mode: the row's one value, j ignored).
  float accumulator(Side side, uint32_t r, uint32_t j) const;

 private:
  float lr_;
  bool per_row_;
  float init_;
  RowMatrix acc_[2];  // indexed by Side; rows x dim, or rows x 1 in per-row mode
};

// Builds an optimiser of the given kind. Errors: InvalidArgument if the learning rate is not
// finite and positive.
Status MakeOptimizer(OptimizerKind kind, float learning_rate, std::unique_ptr<Optimizer>* out);

}  // namespace plumb::trainer
