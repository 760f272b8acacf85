// The nearest-rank percentile (core/percentile.h), against hand-worked ranks and numpy.
#include "core/percentile.h"

#include <gtest/gtest.h>

#include <cstdint>
#include <vector>

namespace plumb {
namespace {

// Hand-worked: for 1..10 the p-th percentile is the value of rank ceil(p/100 · 10).
TEST(NearestRankPercentile, TenValuesByHand) {
  std::vector<int64_t> v{1, 2, 3, 4, 5, 6, 7, 8, 9, 10};
  const std::span<const int64_t> s(v);
  EXPECT_EQ(NearestRankPercentile(s, 10), 1);   // rank 1
  EXPECT_EQ(NearestRankPercentile(s, 11), 2);   // ceil(1.1) = 2
  EXPECT_EQ(NearestRankPercentile(s, 50), 5);   // rank 5 exactly, not 6
  EXPECT_EQ(NearestRankPercentile(s, 99), 10);  // ceil(9.9) = 10
  EXPECT_EQ(NearestRankPercentile(s, 100), 10);
  EXPECT_EQ(NearestRankPercentile(s, 0.001), 1);  // clamped to rank 1
}

// Where the rule differs from taking index floor(q·n): for 100 values the 99th percentile is
// rank 99 (value 99), not index 99 (value 100); numpy: np.percentile(np.arange(1, 101), 99,
// method="inverted_cdf") == 99.
TEST(NearestRankPercentile, NinetyNinthOfAHundredIsTheNinetyNinthValue) {
  std::vector<double> v;
  for (int i = 1; i <= 100; ++i) v.push_back(i);
  EXPECT_EQ(NearestRankPercentile(std::span<const double>(v), 99), 99.0);
  EXPECT_EQ(NearestRankPercentile(std::span<const double>(v), 50), 50.0);
  EXPECT_EQ(NearestRankIndex(99.9, 1000), 998u);  // rank ceil(999) = 999
}

TEST(NearestRankPercentile, EmptyAndSingle) {
  EXPECT_EQ(NearestRankPercentile(std::span<const double>(), 50), 0.0);
  const std::vector<double> one{7.5};
  EXPECT_EQ(NearestRankPercentile(std::span<const double>(one), 1), 7.5);
  EXPECT_EQ(NearestRankPercentile(std::span<const double>(one), 100), 7.5);
}

}  // namespace
}  // namespace plumb
