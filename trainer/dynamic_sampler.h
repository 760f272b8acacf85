// DynamicSampler: hard-sample selection for any objective. Draws ceil(beta * B) candidate
// samples, computes each one's margin with the current model, and keeps the B with the
// smallest margins (std::nth_element, O(beta B)). beta = 1 is plain random sampling and
// computes no margins. DESIGN.md section 2: beta = 3 is the default for CPR.
#pragma once

#include <cstdint>
#include <span>
#include <vector>

#include "core/status.h"
#include "trainer/embeddings.h"
#include "trainer/objective.h"
#include "trainer/rng.h"
#include "trainer/sample.h"
#include "trainer/sampler.h"

namespace plumb::trainer {

inline constexpr double kDefaultBeta = 3.0;

// Holds scratch buffers, so one DynamicSampler per training thread: not thread-safe. The
// sampler and objective are not owned and must outlive it; they may be shared by threads.
class DynamicSampler {
 public:
  // beta < 1 is treated as 1 (callers validate user input; see FitLoop::Create).
  DynamicSampler(const Sampler* sampler, const Objective* objective, double beta)
      : sampler_(sampler), objective_(objective), beta_(beta < 1.0 ? 1.0 : beta) {}

  double beta() const { return beta_; }

  // Appends batch_size samples to *batch: the hardest of ceil(beta * batch_size) candidates
  // under `model`. Errors: those of Sampler::Draw; *batch may then hold part of the batch.
  Status DrawBatch(const Embeddings& model, uint32_t batch_size, Rng* rng,
                   std::vector<Sample>* batch);

  // Appends one sample per anchor interaction: for each, the hardest of ceil(beta)
  // candidates anchored on it (Sampler::DrawAnchored). Errors: as DrawAnchored.
  Status DrawAnchoredBatch(const Embeddings& model, std::span<const uint64_t> anchors, Rng* rng,
                           std::vector<Sample>* batch);

  // The candidates of the last DrawBatch with beta > 1 and their margins (for tests and
  // diagnostics). Valid until the next call.
  std::span<const Sample> candidates() const { return candidates_; }
  std::span<const float> candidate_margins() const { return margins_; }

 private:
  const Sampler* sampler_;
  const Objective* objective_;
  double beta_;
  std::vector<Sample> candidates_;
  std::vector<float> margins_;
  std::vector<uint32_t> order_;
};

}  // namespace plumb::trainer
