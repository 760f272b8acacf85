#include "status/history_ring.h"

#include <gtest/gtest.h>

#include <cmath>
#include <limits>
#include <thread>
#include <vector>

namespace plumb::status {
namespace {

const double kNaN = std::numeric_limits<double>::quiet_NaN();

TEST(HistoryRing, KeepsAtMostCapacityDroppingTheOldest) {
  HistoryRing ring({"a"}, 4);
  for (int i = 0; i < 10; ++i) {
    const double v = i;
    ASSERT_TRUE(ring.Add(1000 * i, {&v, 1}).ok());
    EXPECT_LE(ring.size(), 4u);
  }
  EXPECT_EQ(ring.size(), 4u);
  const HistoryView v = ring.Read(100);
  EXPECT_EQ(v.added, 10u);
  // The last four points, oldest first, unchanged (fewer points than max_points).
  ASSERT_EQ(v.time_ms, (std::vector<int64_t>{6000, 7000, 8000, 9000}));
  EXPECT_EQ(v.mean[0], (std::vector<double>{6, 7, 8, 9}));
  EXPECT_EQ(v.min[0], v.mean[0]);
  EXPECT_EQ(v.max[0], v.mean[0]);
  EXPECT_EQ(v.points, (std::vector<uint32_t>{1, 1, 1, 1}));
}

TEST(HistoryRing, DownsamplesIntoBucketsClosedByTheNewestPoint) {
  // Hand-worked: 10 points 0..9, at most 4 buckets -> width ceil(10/4) = 3, buckets
  // {0}, {1,2,3}, {4,5,6}, {7,8,9}: means 0, 2, 5, 8; the newest point closes the last bucket.
  HistoryRing ring({"x", "y"}, 1440);
  for (int i = 0; i < 10; ++i) {
    const double vals[2] = {static_cast<double>(i), 100.0 - i};
    ASSERT_TRUE(ring.Add(60000 * i, vals).ok());
  }
  const HistoryView v = ring.Read(4);
  ASSERT_EQ(v.time_ms.size(), 4u);
  EXPECT_EQ(v.time_ms, (std::vector<int64_t>{0, 180000, 360000, 540000}));
  EXPECT_EQ(v.points, (std::vector<uint32_t>{1, 3, 3, 3}));
  EXPECT_EQ(v.mean[0], (std::vector<double>{0, 2, 5, 8}));
  EXPECT_EQ(v.min[0], (std::vector<double>{0, 1, 4, 7}));
  EXPECT_EQ(v.max[0], (std::vector<double>{0, 3, 6, 9}));
  EXPECT_EQ(v.mean[1], (std::vector<double>{100, 98, 95, 92}));
  EXPECT_EQ(v.Find("y"), 1);
  EXPECT_EQ(v.Find("z"), -1);
}

TEST(HistoryRing, DownsamplingPreservesTheTotalOfEveryPoint) {
  // Exact property: sum over buckets of mean × points = sum of all points (no NaN), for
  // every bucket count, after the ring wrapped around.
  HistoryRing ring({"v"}, 1440);
  double total = 0;
  for (int i = 0; i < 2000; ++i) {
    const double x = std::sin(i * 0.37) * 10 + i % 7;
    ASSERT_TRUE(ring.Add(i, {&x, 1}).ok());
    if (i >= 2000 - 1440) total += x;
  }
  for (size_t max_points : {1u, 2u, 7u, 100u, 239u, 240u, 1439u, 1440u, 5000u}) {
    const HistoryView v = ring.Read(max_points);
    ASSERT_LE(v.time_ms.size(), max_points);
    double sum = 0;
    uint64_t points = 0;
    for (size_t b = 0; b < v.time_ms.size(); ++b) {
      sum += v.mean[0][b] * v.points[b];
      points += v.points[b];
      EXPECT_LE(v.min[0][b], v.mean[0][b]);
      EXPECT_GE(v.max[0][b], v.mean[0][b]);
    }
    EXPECT_EQ(points, 1440u) << max_points;
    EXPECT_NEAR(sum, total, 1e-8) << max_points;
    EXPECT_EQ(v.time_ms.back(), 1999) << max_points;
  }
}

TEST(HistoryRing, NotMeasuredValuesAreGapsNotZeros) {
  HistoryRing ring({"v"}, 10);
  const double values[] = {kNaN, 4.0, std::numeric_limits<double>::infinity(), kNaN, kNaN, 8.0};
  for (int i = 0; i < 6; ++i) ASSERT_TRUE(ring.Add(i, {&values[i], 1}).ok());
  const HistoryView all = ring.Read(10);
  EXPECT_TRUE(std::isnan(all.mean[0][0]));
  EXPECT_TRUE(std::isnan(all.mean[0][2]));  // infinity is stored as "not measured"
  const HistoryView two = ring.Read(2);     // {nan, 4, inf}, {nan, nan, 8}
  EXPECT_EQ(two.mean[0], (std::vector<double>{4.0, 8.0}));
  const HistoryView three = ring.Read(3);  // {nan, 4}, {inf, nan}, {nan, 8}
  EXPECT_EQ(three.mean[0][0], 4.0);
  EXPECT_TRUE(std::isnan(three.mean[0][1]));
  EXPECT_TRUE(std::isnan(three.min[0][1]));
  EXPECT_EQ(three.mean[0][2], 8.0);
}

TEST(HistoryRing, RefusesBadPointsAndChangesNothing) {
  HistoryRing ring({"a", "b"}, 3);
  const double one[1] = {1};
  EXPECT_FALSE(ring.Add(0, one).ok());
  const double two[2] = {1, 2};
  ASSERT_TRUE(ring.Add(100, two).ok());
  EXPECT_FALSE(ring.Add(99, two).ok());  // older than the newest
  EXPECT_TRUE(ring.Add(100, two).ok());  // same time is fine
  EXPECT_EQ(ring.size(), 2u);
  EXPECT_TRUE(ring.Read(10).time_ms.size() == 2);
  EXPECT_TRUE(HistoryRing({"a"}, 5).Read(3).time_ms.empty());
}

TEST(HistoryRing, ConcurrentReadersSeeWholePoints) {
  HistoryRing ring({"a", "b"}, 64);
  std::thread writer([&] {
    for (int i = 0; i < 20000; ++i) {
      const double v[2] = {static_cast<double>(i), static_cast<double>(-i)};
      ASSERT_TRUE(ring.Add(i, v).ok());
    }
  });
  for (int r = 0; r < 2000; ++r) {
    const HistoryView v = ring.Read(64);
    ASSERT_LE(v.time_ms.size(), 64u);
    for (size_t b = 0; b < v.time_ms.size(); ++b) {
      ASSERT_EQ(v.mean[0][b], -v.mean[1][b]);  // both values of a point come together
      ASSERT_EQ(v.mean[0][b], static_cast<double>(v.time_ms[b]));
    }
  }
  writer.join();
}

}  // namespace
}  // namespace plumb::status
