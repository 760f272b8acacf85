// Objectives: one small interface, one class per training loss (in the spirit of fastText's
// loss hierarchy). The fit loop and the samplers do not know which objective they run: they
// ask for a sample's margin (how well the model already ranks it; dynamic sampling keeps
// the smallest) and for a step (loss, gradient, regularisation, optimiser update on the rows
// the sample touches).
//
//   CprObjective  cross-pairwise ranking, as published at The Web Conference 2022: with
//                 m = (1/k) (sum_t s(u_t, i_t) - sum_t s(u_t, i_{t+1 mod k})), loss -ln sigma(m).
//   BprObjective  Bayesian personalised ranking (Rendle et al., UAI 2009):
//                 m = s(u, i) - s(u, j), loss -ln sigma(m).
//   BceObjective  binary cross-entropy with sampled negatives:
//                 loss -ln sigma(s(u, i)) - sum_j ln sigma(-s(u, j)).
//
// All objectives are stateless after construction: every method is const and thread-safe.
#pragma once

#include <cstdint>
#include <memory>
#include <string_view>
#include <vector>

#include "core/status.h"
#include "trainer/embeddings.h"
#include "trainer/optimizer.h"
#include "trainer/sample.h"

namespace plumb::trainer {

enum class ObjectiveKind : uint8_t { kCpr, kBpr, kBce };

// "cpr" | "bpr" | "bce". Errors: InvalidArgument naming the accepted values.
Status ParseObjectiveKind(std::string_view name, ObjectiveKind* out);
std::string_view ObjectiveName(ObjectiveKind kind);

// ln sigma(x) = -ln(1 + e^{-x}), computed without overflow or cancellation for any x
// (min(x, 0) - log1p(e^{-|x|})).
float LogSigmoid(float x);
// sigma(x) = 1 / (1 + e^{-x}), without overflow for any x.
float Sigmoid(float x);

// The gradient of one sample's loss with respect to every row it touches. Caller-owned
// scratch, reused across samples (one per thread): after Reset(dim) nothing allocates.
class RowGradients {
 public:
  static constexpr uint32_t kMaxRows = 2 * kMaxSampleSlots + 1;

  void Reset(uint32_t dim) {
    dim_ = dim;
    count_ = 0;
    if (values_.size() < static_cast<size_t>(kMaxRows) * dim) values_.resize(kMaxRows * dim);
  }
  // Adds a gradient slot for (side, row) and returns it: dim floats, uninitialised (the
  // objective writes every value). At most kMaxRows slots between Resets.
  float* Add(Side side, uint32_t row) {
    sides_[count_] = side;
    rows_[count_] = row;
    return values_.data() + static_cast<size_t>(count_++) * dim_;
  }
  uint32_t count() const { return count_; }
  uint32_t dim() const { return dim_; }
  Side side(uint32_t n) const { return sides_[n]; }
  uint32_t row(uint32_t n) const { return rows_[n]; }
  float* grad(uint32_t n) { return values_.data() + static_cast<size_t>(n) * dim_; }
  const float* grad(uint32_t n) const { return values_.data() + static_cast<size_t>(n) * dim_; }

 private:
  uint32_t dim_ = 0;
  uint32_t count_ = 0;
  Side sides_[kMaxRows];
  uint32_t rows_[kMaxRows];
  std::vector<float> values_;
};

class Objective {
 public:
  virtual ~Objective() = default;

  virtual ObjectiveKind kind() const = 0;

  // How well the model already ranks the sample: larger is easier. Dynamic sampling keeps
  // the candidates with the smallest margins. CPR: m above; BPR: s(u,i) - s(u,j);
  // BCE: s(u,i) - mean_j s(u,j).
  virtual float Margin(const Embeddings& model, const Sample& sample) const = 0;

  // The sample's loss (without regularisation) and, in *grads (Reset and filled here), the
  // loss's gradient with respect to every row the sample touches. A row touched twice (BCE
  // negatives drawn with replacement) appears twice; its two parts add up.
  // Precondition: the sample is valid for this objective and its indexes are in range.
  virtual float LossAndGradient(const Embeddings& model, const Sample& sample,
                                RowGradients* grads) const = 0;

  // Observed interactions a sample consumes (k for CPR, 1 for BPR and BCE): an epoch uses
  // as many as there are training pairs.
  virtual uint32_t Positives(const Sample& sample) const = 0;

  // One training step: LossAndGradient, then for every touched row r the update
  // optimizer->Apply(grad_r + l2 * r). All gradients are computed from the parameters as
  // they were before the step. Returns the loss before the update.
  // Thread-safety: concurrent Steps on one model are Hogwild-style (see trainer.h).
  float Step(Embeddings* model, Optimizer* optimizer, const Sample& sample, float l2,
             RowGradients* grads) const;
};

// CPR with any k in 2..kMaxSampleSlots (taken from the sample, so several k mix freely).
class CprObjective final : public Objective {
 public:
  ObjectiveKind kind() const override { return ObjectiveKind::kCpr; }
  float Margin(const Embeddings& model, const Sample& sample) const override;
  float LossAndGradient(const Embeddings& model, const Sample& sample,
                        RowGradients* grads) const override;
  uint32_t Positives(const Sample& sample) const override { return sample.k; }
};

class BprObjective final : public Objective {
 public:
  ObjectiveKind kind() const override { return ObjectiveKind::kBpr; }
  float Margin(const Embeddings& model, const Sample& sample) const override;
  float LossAndGradient(const Embeddings& model, const Sample& sample,
                        RowGradients* grads) const override;
  uint32_t Positives(const Sample&) const override { return 1; }
};

class BceObjective final : public Objective {
 public:
  ObjectiveKind kind() const override { return ObjectiveKind::kBce; }
  float Margin(const Embeddings& model, const Sample& sample) const override;
  float LossAndGradient(const Embeddings& model, const Sample& sample,
                        RowGradients* grads) const override;
  uint32_t Positives(const Sample&) const override { return 1; }
};

// The CPR margin m = (1/k) (sum_t s(u_t, i_t) - sum_t s(u_t, i_{t+1 mod k})) of a sample
// under any score function score(user, item) -> T (float or double). CprObjective::Margin is
// this with the model's dot-product score; tests use it to check that additive user and
// item terms cancel.
template <typename ScoreFn>
auto CprMarginOf(const Sample& sample, ScoreFn&& score) {
  using T = decltype(score(sample.users[0], sample.items[0]));
  const uint32_t k = sample.k;
  T sum = 0;
  for (uint32_t t = 0; t < k; ++t) {
    const uint32_t next = (t + 1 == k) ? 0 : t + 1;
    sum += score(sample.users[t], sample.items[t]) - score(sample.users[t], sample.items[next]);
  }
  return sum / static_cast<T>(k);
}

// The objective of a kind (stateless, so one instance serves any number of threads).
std::unique_ptr<Objective> MakeObjective(ObjectiveKind kind);

}  // namespace plumb::trainer
