// LatencyRecord: nearest-rank percentiles, exact below the sample cap, reservoir above.
#include "tools/latency_record.h"

#include <gtest/gtest.h>

#include <cstdio>
#include <cstdlib>
#include <fstream>
#include <random>
#include <string>

#ifndef PLUMB_PYTHON3
#define PLUMB_PYTHON3 "python3"
#endif

namespace plumb::tools {
namespace {

TEST(LatencyRecordTest, EmptyRecordSummarisesToZeros) {
  LatencyRecord record;
  const LatencySummary s = record.Summarize();
  EXPECT_EQ(s.count, 0u);
  EXPECT_EQ(s.p50_ns, 0);
  EXPECT_EQ(s.max_ns, 0);
}

// Hand-worked nearest-rank example (Hyndman & Fan 1996, definition 1): for the values
// 1..10 the p-th percentile is the value of rank ceil(p/100 * 10).
TEST(LatencyRecordTest, NearestRankOnOneToTen) {
  LatencyRecord record;
  for (int v : {7, 3, 10, 1, 9, 2, 8, 4, 6, 5}) record.Add(v);
  EXPECT_EQ(record.Percentile(10), 1);  // rank 1
  EXPECT_EQ(record.Percentile(11), 2);  // ceil(1.1) = 2
  EXPECT_EQ(record.Percentile(50), 5);  // rank 5 exactly, not 6
  EXPECT_EQ(record.Percentile(90), 9);
  EXPECT_EQ(record.Percentile(99), 10);
  EXPECT_EQ(record.Percentile(100), 10);
  const LatencySummary s = record.Summarize();
  EXPECT_EQ(s.count, 10u);
  EXPECT_EQ(s.kept, 10u);
  EXPECT_EQ(s.min_ns, 1);
  EXPECT_EQ(s.max_ns, 10);
  EXPECT_DOUBLE_EQ(s.mean_ns, 5.5);
  EXPECT_EQ(s.p50_ns, 5);
  EXPECT_EQ(s.p999_ns, 10);
}

TEST(LatencyRecordTest, NegativeLatenciesCountAsZero) {
  LatencyRecord record;
  record.Add(-5);
  record.Add(4);
  EXPECT_EQ(record.Summarize().min_ns, 0);
}

// Outside reference: numpy's percentile with method="inverted_cdf" is the nearest-rank
// definition (numpy >= 1.22, Debian bookworm's python3-numpy). Skipped without python3.
TEST(LatencyRecordTest, AgreesWithNumpyInvertedCdf) {
  const std::string python = PLUMB_PYTHON3;
  if (python.empty() || std::system((python + " -c 'import numpy' >/dev/null 2>&1").c_str()) != 0) {
    GTEST_SKIP() << "python3 with numpy is not available";
  }
  std::mt19937_64 rng(42);
  std::lognormal_distribution<double> skewed(11.0, 0.8);  // a latency-like long tail
  LatencyRecord record;
  const std::string data = ::testing::TempDir() + "/latencies.txt";
  {
    std::ofstream out(data);
    for (int i = 0; i < 4999; ++i) {
      const int64_t ns = static_cast<int64_t>(skewed(rng));
      record.Add(ns);
      out << ns << "\n";
    }
  }
  const std::string script = ::testing::TempDir() + "/percentiles.py";
  {
    std::ofstream out(script);
    out << "import numpy as np, sys\n"
           "x = np.loadtxt(sys.argv[1], dtype=np.int64)\n"
           "for p in (50, 90, 99, 99.9):\n"
           "    print(int(np.percentile(x, p, method='inverted_cdf')))\n";
  }
  FILE* pipe = popen((python + " " + script + " " + data).c_str(), "r");
  ASSERT_NE(pipe, nullptr);
  long long expected[4] = {0, 0, 0, 0};
  for (long long& e : expected) ASSERT_EQ(std::fscanf(pipe, "%lld", &e), 1);
  pclose(pipe);
  EXPECT_EQ(record.Percentile(50), expected[0]);
  EXPECT_EQ(record.Percentile(90), expected[1]);
  EXPECT_EQ(record.Percentile(99), expected[2]);
  EXPECT_EQ(record.Percentile(99.9), expected[3]);
}

// Beyond the cap: count, mean, min and max stay exact; the kept sample is uniform over all
// calls, so the median of a uniform 0..999999 sequence stays near 500000.
TEST(LatencyRecordTest, ReservoirKeepsExactCountsAndAnUnbiasedSample) {
  LatencyRecord record(/*max_samples=*/2000, /*seed=*/7);
  for (int64_t v = 0; v < 1'000'000; ++v) record.Add(v);
  const LatencySummary s = record.Summarize();
  EXPECT_EQ(s.count, 1'000'000u);
  EXPECT_EQ(s.kept, 2000u);
  EXPECT_EQ(s.min_ns, 0);
  EXPECT_EQ(s.max_ns, 999'999);
  EXPECT_DOUBLE_EQ(s.mean_ns, 499'999.5);
  // Standard error of a sample median of 2000 uniform draws is about 11,000 (0.5/sqrt(n)
  // of the range); 5 standard errors.
  EXPECT_NEAR(static_cast<double>(s.p50_ns), 500'000.0, 56'000.0);
  // A sample that kept only the first calls would have a p90 near 1800.
  EXPECT_GT(s.p90_ns, 800'000);
}

}  // namespace
}  // namespace plumb::tools
