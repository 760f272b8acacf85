// Small fixtures shared by the trainer suites: random models and random interaction data.
#pragma once

#include <gtest/gtest.h>

#include <cmath>
#include <cstdint>
#include <vector>

#include "trainer/embeddings.h"
#include "trainer/interactions.h"
#include "trainer/rng.h"

namespace plumb::trainer::testing {

// A model whose values are N(0, scale^2), large enough that gradients are far from zero.
inline Embeddings RandomModel(uint32_t dim, uint32_t users, uint32_t items, uint64_t seed,
                              float scale = 0.5f) {
  Embeddings m;
  Status s = Embeddings::Create(dim, users, items, seed, &m, scale * std::sqrt(float(dim)));
  EXPECT_TRUE(s.ok()) << s.ToString();
  return m;
}

// Each (user, item) observed independently with probability density.
inline Interactions RandomData(uint32_t users, uint32_t items, double density, uint64_t seed) {
  Rng rng(seed);
  std::vector<Pair> pairs;
  for (uint32_t u = 0; u < users; ++u) {
    for (uint32_t i = 0; i < items; ++i) {
      if (rng.Bernoulli(density)) pairs.push_back(Pair{u, i});
    }
  }
  // Shuffle so that insertion order is not sorted (as in a real event stream).
  for (size_t n = pairs.size(); n > 1; --n) std::swap(pairs[n - 1], pairs[rng.Uniform(n)]);
  Interactions d;
  Status s = Interactions::Build(pairs, users, items, &d);
  EXPECT_TRUE(s.ok()) << s.ToString();
  return d;
}

}  // namespace plumb::trainer::testing
