// ZipfDraw: which user (or item) a load generator asks about next. Real request streams
// are skewed: a few users call often, most rarely. Rank r (1-based) is drawn with
// probability proportional to 1 / r^s, and ranks map to ids through a seeded random
// permutation so that the heavy users are not simply the first lines of the id file.
#pragma once

#include <cstddef>
#include <cstdint>
#include <random>
#include <vector>

namespace plumb::tools {

class ZipfDraw {
 public:
  // n >= 1 indexes; s >= 0 (0: uniform; 1: classic Zipf). The permutation comes from
  // `seed`, so two runs with the same seed draw the same popular users.
  ZipfDraw(size_t n, double s, uint64_t seed);

  // An index in [0, n). Const and thread-safe when each thread brings its own generator.
  size_t operator()(std::mt19937_64& rng) const;

  // Probability of drawing `index` (for tests and reports).
  double Probability(size_t index) const;

  // The index drawn with rank r (0-based: 0 is the most frequent).
  size_t IndexOfRank(size_t rank) const { return order_[rank]; }

  size_t size() const { return order_.size(); }

 private:
  std::vector<double> cdf_;        // cdf_[r] = P(rank <= r), cdf_.back() == 1
  std::vector<uint32_t> order_;    // rank -> index
  std::vector<uint32_t> rank_of_;  // index -> rank
};

}  // namespace plumb::tools
