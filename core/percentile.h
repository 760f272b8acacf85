// Percentiles: one definition for every latency or duration figure plumb reports (plumb-load,
// the benchmarks, the README). The nearest rank: the p-th percentile (0 < p <= 100) of n
// ascending values is the value at rank ceil(p/100 · n) (1-based, clamped to [1, n]), so it
// is always an observed value (Hyndman & Fan 1996, definition 1; numpy's np.percentile with
// method="inverted_cdf").
//
// The status pages' latency quantiles are another thing: estimates from a Prometheus
// histogram's buckets (status/rates.h, the rule of histogram_quantile()).
#pragma once

#include <algorithm>
#include <cmath>
#include <cstddef>
#include <span>

namespace plumb {

// The 0-based index of the nearest-rank p-th percentile among n >= 1 ascending values.
inline size_t NearestRankIndex(double p, size_t n) {
  const double count = static_cast<double>(n);
  // The small subtraction keeps exact products (p = 50, n = 10 -> rank 5) from rounding up to
  // the next rank through floating-point noise.
  const double rank = std::clamp(std::ceil(p / 100.0 * count - 1e-9), 1.0, count);
  return static_cast<size_t>(rank) - 1;
}

// The nearest-rank p-th percentile of `ascending` (sorted by the caller); T{} when empty.
template <typename T>
T NearestRankPercentile(std::span<const T> ascending, double p) {
  if (ascending.empty()) return T{};
  return ascending[NearestRankIndex(p, ascending.size())];
}

}  // namespace plumb
