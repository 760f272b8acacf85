// LatencyRecord: the latencies of one load run, kept as raw samples so that percentiles are
// exact (no histogram buckets) for runs of up to `max_samples` calls.
#pragma once

#include <cstddef>
#include <cstdint>
#include <random>
#include <vector>

namespace plumb::tools {

// Percentiles by the nearest-rank definition (core/percentile.h): the p-th percentile of n
// sorted values is the value at rank ceil(p/100 * n) (1-based), so it is always an observed
// latency (Hyndman & Fan 1996, definition 1; numpy's method="inverted_cdf").
struct LatencySummary {
  uint64_t count = 0;  // calls recorded
  uint64_t kept = 0;   // samples the percentiles were taken from (== count below the cap)
  int64_t min_ns = 0;
  double mean_ns = 0;  // over all recorded calls, exact
  int64_t p50_ns = 0;
  int64_t p90_ns = 0;
  int64_t p99_ns = 0;
  int64_t p999_ns = 0;
  int64_t max_ns = 0;  // over all recorded calls, exact
};

// Not thread-safe: one writer, or a lock around Add (the load engine does the latter).
class LatencyRecord {
 public:
  // Beyond `max_samples` calls the kept samples become a uniform random sample of all
  // calls (reservoir sampling, Vitter's algorithm R), so percentiles turn into estimates;
  // count, mean, min and max stay exact. 16M samples are 128 MB.
  explicit LatencyRecord(size_t max_samples = size_t{1} << 24, uint64_t seed = 1);

  // Records one latency in nanoseconds (negative values are recorded as 0).
  void Add(int64_t ns);

  uint64_t count() const { return count_; }

  // Sorts the kept samples (hence not const) and summarises them. All zero when empty.
  LatencySummary Summarize();

  // The nearest-rank p-th percentile (0 < p <= 100) of the kept samples; 0 when empty.
  // Sorts the kept samples.
  int64_t Percentile(double p);

 private:
  size_t max_samples_;
  std::vector<int64_t> samples_;
  bool sorted_ = true;
  uint64_t count_ = 0;
  long double sum_ = 0;
  int64_t min_ = 0, max_ = 0;
  std::mt19937_64 rng_;
};

}  // namespace plumb::tools
