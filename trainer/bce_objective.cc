// Binary cross-entropy with sampled negatives (pointwise logistic loss; common practice for
// implicit feedback): the observed pair is labelled 1 and each sampled unobserved item 0,
//   loss = -ln sigma(s(u, i)) - sum_j ln sigma(-s(u, j)),
//   dL/ds(u,i) = -sigma(-s(u,i)),  dL/ds(u,j) = sigma(s(u,j)),
// and s(u, x) = <p_u, q_x> gives the row gradients by the chain rule.
#include "trainer/objective.h"

namespace plumb::trainer {

float BceObjective::Margin(const Embeddings& model, const Sample& sample) const {
  const uint32_t dim = model.dim();
  const float* p = model.user_row(sample.users[0]);
  float neg = 0.0f;
  for (uint32_t n = 0; n < sample.num_negatives; ++n) {
    neg += Dot(p, model.item_row(sample.negatives[n]), dim);
  }
  if (sample.num_negatives > 0) neg /= static_cast<float>(sample.num_negatives);
  return Dot(p, model.item_row(sample.items[0]), dim) - neg;
}

float BceObjective::LossAndGradient(const Embeddings& model, const Sample& sample,
                                    RowGradients* grads) const {
  const uint32_t dim = model.dim();
  const float* p = model.user_row(sample.users[0]);
  const float* qi = model.item_row(sample.items[0]);
  const float si = Dot(p, qi, dim);
  const float di = -Sigmoid(-si);
  float loss = -LogSigmoid(si);
  grads->Reset(dim);
  float* gu = grads->Add(Side::kUser, sample.users[0]);
  float* gi = grads->Add(Side::kItem, sample.items[0]);
  for (uint32_t c = 0; c < dim; ++c) {
    gu[c] = di * qi[c];
    gi[c] = di * p[c];
  }
  for (uint32_t n = 0; n < sample.num_negatives; ++n) {
    const float* qj = model.item_row(sample.negatives[n]);
    const float sj = Dot(p, qj, dim);
    const float dj = Sigmoid(sj);
    loss -= LogSigmoid(-sj);
    float* gj = grads->Add(Side::kItem, sample.negatives[n]);
    for (uint32_t c = 0; c < dim; ++c) {
      gu[c] += dj * qj[c];
      gj[c] = dj * p[c];
    }
  }
  return loss;
}

}  // namespace plumb::trainer
