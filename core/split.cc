#include "core/split.h"

#include <algorithm>
#include <cmath>
#include <limits>
#include <random>
#include <string>

namespace plumb {
namespace {

// A uniform double in [0, 1) from the top 53 bits of one draw: exactly specified, unlike
// std::uniform_real_distribution whose algorithm is left to the implementation.
double Uniform01(std::mt19937_64& rng) { return static_cast<double>(rng() >> 11) * 0x1.0p-53; }

// A uniform integer in [0, bound), bound > 0, by rejection so that no value is favoured.
uint64_t UniformBelow(std::mt19937_64& rng, uint64_t bound) {
  const uint64_t limit = (0 - bound) % bound;  // 2^64 mod bound
  uint64_t x;
  do {
    x = rng();
  } while (x < limit);
  return x % bound;
}

}  // namespace

double keep_probability(uint64_t pop, uint64_t min_pop, double gamma) {
  const double p = static_cast<double>(std::max<uint64_t>(pop, 1));
  const double lo = static_cast<double>(std::max<uint64_t>(min_pop, 1));
  return std::min(1.0, std::pow(lo / p, gamma));
}

Status debiased_split(std::span<const Interaction> held_out, std::span<const uint64_t> degrees,
                      const SplitOptions& options, DebiasedSplit* out) {
  if (out == nullptr) return Status::InvalidArgument("split output is null");
  if (!std::isfinite(options.gamma) || options.gamma < 0.0) {
    return Status::InvalidArgument("gamma must be finite and >= 0, got " +
                                   std::to_string(options.gamma));
  }
  if (!(options.validation_fraction >= 0.0 && options.validation_fraction <= 1.0)) {
    return Status::InvalidArgument("validation fraction must lie in [0, 1], got " +
                                   std::to_string(options.validation_fraction));
  }
  uint64_t min_pop = std::numeric_limits<uint64_t>::max();
  for (const Interaction& x : held_out) {
    if (x.item >= degrees.size()) {
      return Status::InvalidArgument("held-out item " + std::to_string(x.item) +
                                     " outside the catalogue of " + std::to_string(degrees.size()));
    }
    min_pop = std::min(min_pop, std::max<uint64_t>(degrees[x.item], 1));
  }

  std::mt19937_64 rng(options.seed);
  std::vector<std::size_t> kept;
  for (std::size_t j = 0; j < held_out.size(); ++j) {
    const double p = keep_probability(degrees[held_out[j].item], min_pop, options.gamma);
    // One draw per interaction whatever p is, so the stream stays aligned with the input.
    if (Uniform01(rng) < p) kept.push_back(j);
  }
  // Fisher–Yates shuffle of the kept positions.
  for (std::size_t i = kept.size(); i > 1; --i) {
    const std::size_t j = static_cast<std::size_t>(UniformBelow(rng, i));
    std::swap(kept[i - 1], kept[j]);
  }
  const auto n_validation = static_cast<std::size_t>(
      std::llround(options.validation_fraction * static_cast<double>(kept.size())));
  std::sort(kept.begin(), kept.begin() + static_cast<std::ptrdiff_t>(n_validation));
  std::sort(kept.begin() + static_cast<std::ptrdiff_t>(n_validation), kept.end());

  DebiasedSplit split;
  split.offered = held_out.size();
  split.kept = kept.size();
  split.validation.reserve(n_validation);
  split.test.reserve(kept.size() - n_validation);
  for (std::size_t j = 0; j < kept.size(); ++j) {
    (j < n_validation ? split.validation : split.test).push_back(held_out[kept[j]]);
  }
  *out = std::move(split);
  return Status::Ok();
}

}  // namespace plumb
