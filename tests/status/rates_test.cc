#include "status/rates.h"

#include <gtest/gtest.h>

#include <cmath>
#include <vector>

namespace plumb::status {
namespace {

TEST(HistogramQuantile, InterpolatesInsideTheBucketAsPrometheusDoes) {
  // Hand-worked with Prometheus' histogram_quantile rule (promql/quantile.go: linear
  // interpolation between the bucket's lower and upper bound by rank):
  // bounds 1, 2, 4; cumulative 10, 30, 40, 40 (nothing above 4).
  const std::vector<double> bounds = {1, 2, 4};
  const std::vector<double> cum = {10, 30, 40, 40};
  // q = 0.5: rank 20 falls in (1, 2] holding 20 -> 1 + 1 * (20 - 10) / 20 = 1.5.
  EXPECT_DOUBLE_EQ(HistogramQuantile(0.5, bounds, cum), 1.5);
  // q = 0.1: rank 4 in the first bucket (0, 1] -> 0.4.
  EXPECT_DOUBLE_EQ(HistogramQuantile(0.1, bounds, cum), 0.4);
  // q = 0.99: rank 39.6 in (2, 4] holding 10 -> 2 + 2 * 9.6 / 10 = 3.92.
  EXPECT_DOUBLE_EQ(HistogramQuantile(0.99, bounds, cum), 3.92);
  // In the +Inf bucket: the highest finite bound.
  EXPECT_DOUBLE_EQ(HistogramQuantile(0.99, bounds, std::vector<double>{0, 0, 1, 10}), 4.0);
  EXPECT_TRUE(std::isnan(HistogramQuantile(0.5, bounds, std::vector<double>{0, 0, 0, 0})));
  EXPECT_TRUE(std::isnan(HistogramQuantile(0.5, bounds, std::vector<double>{1, 2})));
}

TEST(RatePerSecond, DeltaOverTimeAndNaNOnAReset) {
  EXPECT_DOUBLE_EQ(RatePerSecond(100, 160, 60), 1.0);
  EXPECT_TRUE(std::isnan(RatePerSecond(100, 50, 60)));
  EXPECT_TRUE(std::isnan(RatePerSecond(100, 160, 0)));
}

}  // namespace
}  // namespace plumb::status
