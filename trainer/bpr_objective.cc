// BPR, Bayesian personalised ranking (Rendle, Freudenthaler, Gantner & Schmidt-Thieme,
// UAI 2009), matrix-factorisation form without biases:
//   x = s(u, i) - s(u, j),  loss -ln sigma(x),  dL/dx = -sigma(-x),
//   dx/dp_u = q_i - q_j,  dx/dq_i = p_u,  dx/dq_j = -p_u.
#include "trainer/objective.h"

namespace plumb::trainer {

float BprObjective::Margin(const Embeddings& model, const Sample& sample) const {
  const float* p = model.user_row(sample.users[0]);
  return Dot(p, model.item_row(sample.items[0]), model.dim()) -
         Dot(p, model.item_row(sample.negatives[0]), model.dim());
}

float BprObjective::LossAndGradient(const Embeddings& model, const Sample& sample,
                                    RowGradients* grads) const {
  const uint32_t dim = model.dim();
  const float* p = model.user_row(sample.users[0]);
  const float* qi = model.item_row(sample.items[0]);
  const float* qj = model.item_row(sample.negatives[0]);
  const float x = Dot(p, qi, dim) - Dot(p, qj, dim);
  const float dx = -Sigmoid(-x);
  grads->Reset(dim);
  float* gu = grads->Add(Side::kUser, sample.users[0]);
  float* gi = grads->Add(Side::kItem, sample.items[0]);
  float* gj = grads->Add(Side::kItem, sample.negatives[0]);
  for (uint32_t c = 0; c < dim; ++c) {
    gu[c] = dx * (qi[c] - qj[c]);
    gi[c] = dx * p[c];
    gj[c] = -dx * p[c];
  }
  return -LogSigmoid(x);
}

}  // namespace plumb::trainer
