// Debiased evaluation split (DESIGN.md §2): held-out interactions are re-sampled so that
// popular items are under-represented, then divided into validation and test sets.
#pragma once

#include <cstddef>
#include <cstdint>
#include <span>
#include <vector>

#include "core/status.h"

namespace plumb {

// One observed (user, item) interaction, as dense indices.
struct Interaction {
  uint32_t user = 0;
  uint32_t item = 0;

  friend bool operator==(const Interaction&, const Interaction&) = default;
};

struct SplitOptions {
  // Keep probability ∝ 1 / pop(i)^gamma. gamma = 1 makes the kept item distribution roughly
  // uniform; gamma = 0 keeps everything. Must be finite and >= 0.
  double gamma = 1.0;
  // Fraction of the kept interactions that go to validation; the rest go to test. In [0, 1].
  double validation_fraction = 0.5;
  // The same seed, inputs and options give the same split on every platform: the random
  // numbers are drawn from std::mt19937_64 (fully specified by the standard) and turned into
  // uniforms and shuffles by our own code, not by the implementation-defined std
  // distributions.
  uint64_t seed = 1;
};

// The keep probability of an interaction with an item of training degree pop:
//   p = (min_pop / max(pop, 1))^gamma,
// where min_pop is the smallest max(degree, 1) over the items present in the held-out set.
// The normalisation makes the least popular held-out item (the most-kept one) probability 1,
// which keeps as much data as the proportionality allows. A degree of 0 (an item seen only in
// held-out data) is treated as 1, so such items are kept with the top probability.
double keep_probability(uint64_t pop, uint64_t min_pop, double gamma);

struct DebiasedSplit {
  std::vector<Interaction> validation;  // in input order
  std::vector<Interaction> test;        // in input order
  std::size_t offered = 0;              // held_out.size()
  std::size_t kept = 0;                 // validation.size() + test.size()
};

// Keeps each held_out interaction independently with keep_probability(degrees[item], min_pop,
// gamma), then shuffles the kept ones and sends round(validation_fraction · kept) to
// validation and the rest to test; each part keeps the input order. Deterministic per seed.
// Errors (InvalidArgument, *out unchanged): gamma negative or not finite, fraction outside
// [0, 1], an item id >= degrees.size(), or out null. Thread-safe.
Status debiased_split(std::span<const Interaction> held_out, std::span<const uint64_t> degrees,
                      const SplitOptions& options, DebiasedSplit* out);

}  // namespace plumb
