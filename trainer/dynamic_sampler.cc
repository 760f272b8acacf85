#include "trainer/dynamic_sampler.h"

#include <algorithm>
#include <cmath>
#include <numeric>

namespace plumb::trainer {

Status DynamicSampler::DrawBatch(const Embeddings& model, uint32_t batch_size, Rng* rng,
                                 std::vector<Sample>* batch) {
  if (beta_ <= 1.0) {
    Sample s;
    for (uint32_t b = 0; b < batch_size; ++b) {
      PLUMB_RETURN_IF_ERROR(sampler_->Draw(rng, &s));
      batch->push_back(s);
    }
    return Status::Ok();
  }
  const size_t n = static_cast<size_t>(std::ceil(beta_ * batch_size));
  candidates_.resize(n);
  margins_.resize(n);
  for (size_t c = 0; c < n; ++c) {
    PLUMB_RETURN_IF_ERROR(sampler_->Draw(rng, &candidates_[c]));
    margins_[c] = objective_->Margin(model, candidates_[c]);
  }
  order_.resize(n);
  std::iota(order_.begin(), order_.end(), 0u);
  // Ties broken by draw position so the selection is a deterministic function of the draws.
  auto harder = [this](uint32_t a, uint32_t b) {
    return margins_[a] < margins_[b] || (margins_[a] == margins_[b] && a < b);
  };
  std::nth_element(order_.begin(), order_.begin() + batch_size, order_.end(), harder);
  // Train in draw order rather than nth_element's arbitrary order.
  std::sort(order_.begin(), order_.begin() + batch_size);
  for (uint32_t b = 0; b < batch_size; ++b) batch->push_back(candidates_[order_[b]]);
  return Status::Ok();
}

Status DynamicSampler::DrawAnchoredBatch(const Embeddings& model, std::span<const uint64_t> anchors,
                                         Rng* rng, std::vector<Sample>* batch) {
  const uint32_t per_anchor = static_cast<uint32_t>(std::ceil(beta_));
  Sample best, s;
  for (uint64_t anchor : anchors) {
    PLUMB_RETURN_IF_ERROR(sampler_->DrawAnchored(anchor, rng, &best));
    if (per_anchor > 1) {
      float best_margin = objective_->Margin(model, best);
      for (uint32_t c = 1; c < per_anchor; ++c) {
        PLUMB_RETURN_IF_ERROR(sampler_->DrawAnchored(anchor, rng, &s));
        const float m = objective_->Margin(model, s);
        if (m < best_margin) {
          best_margin = m;
          best = s;
        }
      }
    }
    batch->push_back(best);
  }
  return Status::Ok();
}

}  // namespace plumb::trainer
