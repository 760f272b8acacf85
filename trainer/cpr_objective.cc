// CPR, the cross-pairwise ranking objective as published at The Web Conference 2022.
// Notation of DESIGN.md section 2: a sample is k observed pairs (u_t, i_t); the margin
//   m = (1/k) (sum_t s(u_t, i_t) - sum_t s(u_t, i_{t+1 mod k}))
// sees every user and every item exactly once with each sign, so additive user and item
// score terms cancel. Loss -ln sigma(m), with
//   dL/dm = -(1 - sigma(m)) = -sigma(-m),
//   dm/dp_{u_t} = (q_{i_t} - q_{i_{t+1}}) / k,
//   dm/dq_{i_t} = (p_{u_t} - p_{u_{t-1}}) / k.
#include "trainer/objective.h"

namespace plumb::trainer {

namespace {

float CprMargin(const float* const* p, const float* const* q, uint32_t k, uint32_t dim) {
  float sum = 0.0f;
  for (uint32_t t = 0; t < k; ++t) {
    const uint32_t next = (t + 1 == k) ? 0 : t + 1;
    sum += Dot(p[t], q[t], dim) - Dot(p[t], q[next], dim);
  }
  return sum / static_cast<float>(k);
}

}  // namespace

float CprObjective::Margin(const Embeddings& model, const Sample& sample) const {
  return CprMarginOf(sample, [&model](uint32_t u, uint32_t i) { return model.Score(u, i); });
}

float CprObjective::LossAndGradient(const Embeddings& model, const Sample& sample,
                                    RowGradients* grads) const {
  const uint32_t k = sample.k;
  const uint32_t dim = model.dim();
  const float* p[kMaxSampleSlots];
  const float* q[kMaxSampleSlots];
  for (uint32_t t = 0; t < k; ++t) {
    p[t] = model.user_row(sample.users[t]);
    q[t] = model.item_row(sample.items[t]);
  }
  const float m = CprMargin(p, q, k, dim);
  // dL/dm times the 1/k shared by both partial derivatives of m.
  const float scale = -Sigmoid(-m) / static_cast<float>(k);
  grads->Reset(dim);
  for (uint32_t t = 0; t < k; ++t) {
    const uint32_t next = (t + 1 == k) ? 0 : t + 1;
    float* g = grads->Add(Side::kUser, sample.users[t]);
    const float* qa = q[t];
    const float* qb = q[next];
    for (uint32_t j = 0; j < dim; ++j) g[j] = scale * (qa[j] - qb[j]);
  }
  for (uint32_t t = 0; t < k; ++t) {
    const uint32_t prev = (t == 0) ? k - 1 : t - 1;
    float* g = grads->Add(Side::kItem, sample.items[t]);
    const float* pa = p[t];
    const float* pb = p[prev];
    for (uint32_t j = 0; j < dim; ++j) g[j] = scale * (pa[j] - pb[j]);
  }
  return -LogSigmoid(m);
}

}  // namespace plumb::trainer
