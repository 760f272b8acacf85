// ZipfDraw: weights 1/r^s over a seeded permutation of the ids.
#include "tools/zipf_draw.h"

#include <gtest/gtest.h>

#include <cmath>
#include <set>
#include <vector>

namespace plumb::tools {
namespace {

// Exact algebra: with s = 1 and n = 4 the weights are 1, 1/2, 1/3, 1/4 over the harmonic
// number H_4 = 25/12, so the probabilities are 12/25, 6/25, 4/25, 3/25.
TEST(ZipfDrawTest, ProbabilitiesFollowInverseRankPowers) {
  const ZipfDraw draw(4, 1.0, 3);
  const double expected[4] = {12.0 / 25, 6.0 / 25, 4.0 / 25, 3.0 / 25};
  double total = 0;
  for (size_t r = 0; r < 4; ++r) {
    EXPECT_NEAR(draw.Probability(draw.IndexOfRank(r)), expected[r], 1e-12) << "rank " << r;
    total += draw.Probability(r);
  }
  EXPECT_NEAR(total, 1.0, 1e-12);
}

TEST(ZipfDrawTest, ZeroSkewIsUniform) {
  const ZipfDraw draw(8, 0.0, 1);
  for (size_t i = 0; i < 8; ++i) EXPECT_NEAR(draw.Probability(i), 1.0 / 8, 1e-12);
}

TEST(ZipfDrawTest, RanksArePermutedBySeedAndReproducible) {
  const ZipfDraw a(1000, 1.0, 11), b(1000, 1.0, 11), c(1000, 1.0, 12);
  std::set<size_t> seen;
  bool differs = false;
  for (size_t r = 0; r < 1000; ++r) {
    EXPECT_EQ(a.IndexOfRank(r), b.IndexOfRank(r));
    seen.insert(a.IndexOfRank(r));
    differs = differs || a.IndexOfRank(r) != c.IndexOfRank(r);
  }
  EXPECT_EQ(seen.size(), 1000u);  // a permutation
  EXPECT_TRUE(differs);
  // The most frequent id is not simply the first line of the file.
  EXPECT_FALSE(a.IndexOfRank(0) == 0 && a.IndexOfRank(1) == 1 && a.IndexOfRank(2) == 2);
}

// Empirical frequencies against the probabilities: Pearson's chi-square over 20 ids
// (19 degrees of freedom; the 0.999 quantile is 43.8, from standard chi-square tables).
TEST(ZipfDrawTest, DrawsMatchTheProbabilities) {
  const size_t n = 20;
  const ZipfDraw draw(n, 1.2, 5);
  std::mt19937_64 rng(9);
  std::vector<double> counts(n, 0);
  const int draws = 200'000;
  for (int k = 0; k < draws; ++k) {
    const size_t i = draw(rng);
    ASSERT_LT(i, n);
    counts[i] += 1;
  }
  double chi2 = 0;
  for (size_t i = 0; i < n; ++i) {
    const double expected = draws * draw.Probability(i);
    chi2 += (counts[i] - expected) * (counts[i] - expected) / expected;
  }
  EXPECT_LT(chi2, 43.8);
}

TEST(ZipfDrawTest, SingleIdAlwaysDrawn) {
  const ZipfDraw draw(1, 1.0, 1);
  std::mt19937_64 rng(1);
  for (int k = 0; k < 100; ++k) EXPECT_EQ(draw(rng), 0u);
}

}  // namespace
}  // namespace plumb::tools
