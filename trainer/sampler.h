// Samplers: draw training samples from the observed interactions.
//
//   CprSampler       CPR samples: k observed pairs picked uniformly, rejected unless users
//                    are distinct, items are distinct and every cross pair (u_t, i_{t+1 mod k})
//                    is unobserved (DESIGN.md section 2). Rejection of whole draws keeps the
//                    result uniform over valid samples.
//   NegativeSampler  BPR/BCE samples: one observed pair picked uniformly and n items drawn
//                    uniformly from those the user has not interacted with.
//
// Both hold a pointer to the Interactions, which may grow between draws (online): each draw
// looks at the data as it is then. Draw never loops forever: a sampler gives up with a
// Status naming the reason when the data cannot (or practically cannot) form a sample.
#pragma once

#include <cstdint>
#include <memory>

#include "core/status.h"
#include "trainer/interactions.h"
#include "trainer/rng.h"
#include "trainer/sample.h"

namespace plumb::trainer {

// Interface. Draw and DrawAnchored are const and thread-safe (each thread brings its own
// Rng) as long as the Interactions are not modified concurrently.
class Sampler {
 public:
  virtual ~Sampler() = default;

  // Draws one sample into *out.
  // Errors: FailedPrecondition when the data cannot form any sample (too few users or
  // items, a user who has interacted with every item); ResourceExhausted when no valid
  // sample turned up within the attempt budget (data too dense for CPR). *out is
  // unspecified on error.
  virtual Status Draw(Rng* rng, Sample* out) const = 0;

  // As Draw, but the sample contains the observed pair data.pair(anchor) as its first pair
  // (the online trainer makes sure every new interaction is trained on).
  // Errors: as Draw, plus InvalidArgument if anchor >= data.size().
  virtual Status DrawAnchored(uint64_t anchor, Rng* rng, Sample* out) const = 0;

  // Whether the data can form samples at all, without drawing: the cheap, exact part of
  // Draw's FailedPrecondition checks. ResourceExhausted can still come from Draw.
  virtual Status CheckData() const = 0;
};

// The size of the CPR samples mixed into batches at a mix share (CprSamplerOptions::mix_k,
// TrainOptions::cpr_mix_k): the programs' `k3_share` settings name it.
inline constexpr uint32_t kCprMixK = 3;

struct CprSamplerOptions {
  // Pairs per sample, 2..kMaxSampleSlots.
  uint32_t k = 2;
  // Share of samples drawn with mix_k pairs instead of k (0 = none), so that several sample
  // sizes mix in one batch.
  uint32_t mix_k = kCprMixK;
  double mix_share = 0.0;
  // Whole-sample draws tried before Draw gives up with ResourceExhausted.
  uint32_t max_attempts = 2000;
};

class CprSampler final : public Sampler {
 public:
  // Errors: InvalidArgument if k or mix_k is outside 2..kMaxSampleSlots, mix_share outside
  // [0, 1], or max_attempts is 0. `data` is not owned and must outlive the sampler.
  static Status Create(const Interactions* data, const CprSamplerOptions& options,
                       std::unique_ptr<CprSampler>* out);

  Status Draw(Rng* rng, Sample* out) const override;
  Status DrawAnchored(uint64_t anchor, Rng* rng, Sample* out) const override;
  Status CheckData() const override;

  // Whether a sample satisfies every CPR constraint against the data (tests, debugging).
  static bool IsValid(const Interactions& data, const Sample& sample);

  const CprSamplerOptions& options() const { return options_; }

 private:
  CprSampler(const Interactions* data, const CprSamplerOptions& options)
      : data_(data), options_(options) {}
  Status CheckData(uint32_t k) const;
  uint32_t PickK(Rng* rng) const;
  // One attempt; anchor < 0 means none. Returns whether the draw was valid.
  bool TryDraw(uint32_t k, int64_t anchor, Rng* rng, Sample* out) const;
  Status DrawImpl(int64_t anchor, Rng* rng, Sample* out) const;

  const Interactions* data_;
  CprSamplerOptions options_;
};

struct NegativeSamplerOptions {
  // Unobserved items per sample, 1..kMaxSampleSlots (BPR uses 1).
  uint32_t num_negatives = 1;
};

class NegativeSampler final : public Sampler {
 public:
  // Errors: InvalidArgument if num_negatives is outside 1..kMaxSampleSlots. `data` is not
  // owned and must outlive the sampler. Negatives come from items [0, data.num_items()),
  // including catalogue items without interactions.
  static Status Create(const Interactions* data, const NegativeSamplerOptions& options,
                       std::unique_ptr<NegativeSampler>* out);

  Status Draw(Rng* rng, Sample* out) const override;
  Status DrawAnchored(uint64_t anchor, Rng* rng, Sample* out) const override;
  Status CheckData() const override;

  // One item drawn uniformly from those `user` has not interacted with. A few rejection
  // draws first (cheap for sparse users), then an exact inversion over the user's sorted
  // items, so the cost is bounded and the draw stays uniform.
  // Errors: FailedPrecondition if the user has interacted with every item.
  Status DrawNegative(uint32_t user, Rng* rng, uint32_t* item) const;

 private:
  NegativeSampler(const Interactions* data, const NegativeSamplerOptions& options)
      : data_(data), options_(options) {}
  Status Fill(const Pair& pair, Rng* rng, Sample* out) const;

  const Interactions* data_;
  NegativeSamplerOptions options_;
};

}  // namespace plumb::trainer
