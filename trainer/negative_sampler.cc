#include <string>

#include "trainer/sampler.h"

namespace plumb::trainer {

namespace {
// Rejection draws before the exact inversion. For a user with a share f of the catalogue,
// all of them fail with probability f^8: the inversion runs only for very dense users.
constexpr int kRejectionDraws = 8;
}  // namespace

Status NegativeSampler::Create(const Interactions* data, const NegativeSamplerOptions& options,
                               std::unique_ptr<NegativeSampler>* out) {
  if (options.num_negatives < 1 || options.num_negatives > kMaxSampleSlots) {
    return Status::InvalidArgument("negatives per sample must be in 1.." +
                                   std::to_string(kMaxSampleSlots));
  }
  out->reset(new NegativeSampler(data, options));
  return Status::Ok();
}

Status NegativeSampler::CheckData() const {
  if (data_->empty()) {
    return Status::FailedPrecondition("no interactions to sample from");
  }
  if (data_->num_items() < 2) {
    return Status::FailedPrecondition(
        "negative sampling needs at least 2 items; the catalogue has " +
        std::to_string(data_->num_items()));
  }
  return Status::Ok();
}

Status NegativeSampler::DrawNegative(uint32_t user, Rng* rng, uint32_t* item) const {
  const uint32_t num_items = data_->num_items();
  const std::span<const uint32_t> seen = data_->items_of(user);
  if (seen.size() >= num_items) {
    return Status::FailedPrecondition("user #" + std::to_string(user) +
                                      " has interacted with every item (" +
                                      std::to_string(num_items) + "): no negative exists");
  }
  for (int a = 0; a < kRejectionDraws; ++a) {
    const uint32_t j = static_cast<uint32_t>(rng->Uniform(num_items));
    if (!Interactions::ContainsSorted(seen, j)) {
      *item = j;
      return Status::Ok();
    }
  }
  // Exact inversion: the r-th unobserved item is r plus the number of seen items at or
  // below it; walking the sorted list finds it in O(degree).
  uint32_t j = static_cast<uint32_t>(rng->Uniform(num_items - seen.size()));
  for (uint32_t s : seen) {
    if (s <= j) {
      ++j;
    } else {
      break;
    }
  }
  *item = j;
  return Status::Ok();
}

Status NegativeSampler::Fill(const Pair& pair, Rng* rng, Sample* out) const {
  out->k = 1;
  out->users[0] = pair.user;
  out->items[0] = pair.item;
  out->num_negatives = static_cast<uint8_t>(options_.num_negatives);
  for (uint32_t n = 0; n < options_.num_negatives; ++n) {
    PLUMB_RETURN_IF_ERROR(DrawNegative(pair.user, rng, &out->negatives[n]));
  }
  return Status::Ok();
}

Status NegativeSampler::Draw(Rng* rng, Sample* out) const {
  PLUMB_RETURN_IF_ERROR(CheckData());
  return Fill(data_->pair(rng->Uniform(data_->size())), rng, out);
}

Status NegativeSampler::DrawAnchored(uint64_t anchor, Rng* rng, Sample* out) const {
  if (anchor >= data_->size()) {
    return Status::InvalidArgument("anchor interaction #" + std::to_string(anchor) +
                                   " does not exist (" + std::to_string(data_->size()) +
                                   " interactions)");
  }
  PLUMB_RETURN_IF_ERROR(CheckData());
  return Fill(data_->pair(anchor), rng, out);
}

}  // namespace plumb::trainer
