#include <string>

#include "trainer/sampler.h"

namespace plumb::trainer {

Status CprSampler::Create(const Interactions* data, const CprSamplerOptions& options,
                          std::unique_ptr<CprSampler>* out) {
  auto bad_k = [](uint32_t k) { return k < 2 || k > kMaxSampleSlots; };
  if (bad_k(options.k) || (options.mix_share > 0.0 && bad_k(options.mix_k))) {
    return Status::InvalidArgument("CPR sample size k must be in 2.." +
                                   std::to_string(kMaxSampleSlots));
  }
  if (!(options.mix_share >= 0.0 && options.mix_share <= 1.0)) {
    return Status::InvalidArgument("CPR mix share must be in [0, 1]");
  }
  if (options.max_attempts == 0) return Status::InvalidArgument("max_attempts must be > 0");
  out->reset(new CprSampler(data, options));
  return Status::Ok();
}

Status CprSampler::CheckData(uint32_t k) const {
  if (data_->num_active_users() < k || data_->num_active_items() < k) {
    return Status::FailedPrecondition("a CPR sample of k=" + std::to_string(k) +
                                      " needs at least " + std::to_string(k) +
                                      " distinct users and " + std::to_string(k) +
                                      " distinct items with interactions; the data has " +
                                      std::to_string(data_->num_active_users()) + " users and " +
                                      std::to_string(data_->num_active_items()) + " items");
  }
  return Status::Ok();
}

Status CprSampler::CheckData() const {
  PLUMB_RETURN_IF_ERROR(CheckData(options_.k));
  if (options_.mix_share > 0.0) PLUMB_RETURN_IF_ERROR(CheckData(options_.mix_k));
  return Status::Ok();
}

uint32_t CprSampler::PickK(Rng* rng) const {
  // The extra random number is drawn only when mixing, so a pure-k stream is unchanged.
  if (options_.mix_share > 0.0 && rng->UniformDouble() < options_.mix_share) return options_.mix_k;
  return options_.k;
}

bool CprSampler::TryDraw(uint32_t k, int64_t anchor, Rng* rng, Sample* out) const {
  const uint64_t n = data_->size();
  for (uint32_t t = 0; t < k; ++t) {
    const uint64_t idx = (t == 0 && anchor >= 0) ? static_cast<uint64_t>(anchor) : rng->Uniform(n);
    const Pair& p = data_->pair(idx);
    for (uint32_t s = 0; s < t; ++s) {
      if (out->users[s] == p.user || out->items[s] == p.item) return false;
    }
    // The cross pair closed by this draw: (u_{t-1}, i_t) must be unobserved. Checking as
    // we go rejects bad draws early; the result is the same as checking at the end.
    if (t > 0 && data_->Contains(out->users[t - 1], p.item)) return false;
    out->users[t] = p.user;
    out->items[t] = p.item;
  }
  // The wrap-around cross pair (u_{k-1}, i_0).
  if (data_->Contains(out->users[k - 1], out->items[0])) return false;
  out->k = static_cast<uint8_t>(k);
  out->num_negatives = 0;
  return true;
}

Status CprSampler::DrawImpl(int64_t anchor, Rng* rng, Sample* out) const {
  const uint32_t k = PickK(rng);
  PLUMB_RETURN_IF_ERROR(CheckData(k));
  for (uint32_t attempt = 0; attempt < options_.max_attempts; ++attempt) {
    if (TryDraw(k, anchor, rng, out)) return Status::Ok();
  }
  return Status::ResourceExhausted(
      "no valid CPR sample of k=" + std::to_string(k) + " in " +
      std::to_string(options_.max_attempts) + " attempts" +
      (anchor >= 0 ? " containing interaction #" + std::to_string(anchor) : std::string()) +
      ": the interactions are too dense (almost every cross pair is observed) for CPR");
}

Status CprSampler::Draw(Rng* rng, Sample* out) const { return DrawImpl(-1, rng, out); }

Status CprSampler::DrawAnchored(uint64_t anchor, Rng* rng, Sample* out) const {
  if (anchor >= data_->size()) {
    return Status::InvalidArgument("anchor interaction #" + std::to_string(anchor) +
                                   " does not exist (" + std::to_string(data_->size()) +
                                   " interactions)");
  }
  return DrawImpl(static_cast<int64_t>(anchor), rng, out);
}

bool CprSampler::IsValid(const Interactions& data, const Sample& s) {
  const uint32_t k = s.k;
  if (k < 2 || k > kMaxSampleSlots) return false;
  for (uint32_t t = 0; t < k; ++t) {
    if (!data.Contains(s.users[t], s.items[t])) return false;
    for (uint32_t r = 0; r < t; ++r) {
      if (s.users[r] == s.users[t] || s.items[r] == s.items[t]) return false;
    }
    if (data.Contains(s.users[t], s.items[(t + 1) % k])) return false;
  }
  return true;
}

}  // namespace plumb::trainer
