#include "core/exposure_stats.h"

#include <gtest/gtest.h>

#include <cmath>
#include <vector>

#include "core/metrics.h"

namespace plumb {
namespace {

TEST(ExposureStatsTest, HandWorkedSummary) {
  // Degrees [1, 1, 2, 4] -> groups {0, 1, 2} and {3} (see metrics_test). Served counts
  // [0, 3, 1, 0]: 4 slots.
  //   ARP of served slots = (3·1 + 1·2) / 4 = 1.25.
  //   Gini of [0, 0, 1, 3] = (−3·0 − 1·0 + 1·1 + 3·3) / (4·4) = 0.625; coverage 2/4.
  //   Exposure shares [1, 0]; interaction shares [4/8, 4/8].
  //   JS((1, 0), (½, ½)) = 0.311278 bits (hand-worked in metrics_test).
  const std::vector<uint64_t> degrees = {1, 1, 2, 4};
  std::vector<uint32_t> groups;
  ASSERT_TRUE(popularity_groups(degrees, 2, &groups).ok());
  ExposureSummary s;
  ASSERT_TRUE(summarize_exposure(std::vector<uint64_t>{0, 3, 1, 0}, degrees, groups, 2, &s).ok());
  EXPECT_EQ(s.total_exposures, 4u);
  EXPECT_DOUBLE_EQ(s.arp, 1.25);
  EXPECT_DOUBLE_EQ(s.gini, 0.625);
  EXPECT_DOUBLE_EQ(s.coverage, 0.5);
  EXPECT_EQ(s.exposure_group_shares, (std::vector<double>{1.0, 0.0}));
  EXPECT_EQ(s.interaction_group_shares, (std::vector<double>{0.5, 0.5}));
  EXPECT_NEAR(s.drift_js, 0.3112781245, 1e-9);
}

TEST(ExposureStatsTest, NothingServedYet) {
  const std::vector<uint64_t> degrees = {1, 1, 2, 4};
  const std::vector<uint32_t> groups = {0, 0, 0, 1};
  ExposureSummary s;
  ASSERT_TRUE(summarize_exposure(std::vector<uint64_t>(4, 0), degrees, groups, 2, &s).ok());
  EXPECT_EQ(s.total_exposures, 0u);
  EXPECT_EQ(s.arp, 0.0);
  EXPECT_EQ(s.gini, 0.0);
  EXPECT_EQ(s.coverage, 0.0);
  EXPECT_TRUE(std::isnan(s.drift_js));
}

TEST(ExposureStatsTest, RejectsMismatchedInput) {
  const std::vector<uint64_t> degrees = {1, 1, 2, 4};
  ExposureSummary s;
  s.total_exposures = 5;
  EXPECT_EQ(summarize_exposure(std::vector<uint64_t>(3, 1), degrees,
                               std::vector<uint32_t>{0, 0, 0, 1}, 2, &s)
                .code(),
            Status::Code::kInvalidArgument);
  EXPECT_EQ(summarize_exposure(std::vector<uint64_t>(4, 1), degrees,
                               std::vector<uint32_t>{0, 0, 0, 2}, 2, &s)
                .code(),
            Status::Code::kInvalidArgument);
  EXPECT_EQ(s.total_exposures, 5u);
}

}  // namespace
}  // namespace plumb
