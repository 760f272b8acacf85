// Figures a status page derives from Prometheus counters and histograms between two samples:
// per-second rates and quantiles of a histogram's increase.
#pragma once

#include <cstdint>
#include <span>

namespace plumb::status {

// The q-quantile (0 <= q <= 1) of a histogram given as ascending finite upper bounds and
// cumulative counts (one per bound, then the +Inf bucket's: cumulative.size() ==
// upper_bounds.size() + 1), interpolated linearly inside the bucket it falls in, with 0 as
// the lower edge of the first bucket: the rule of Prometheus' histogram_quantile(). A
// quantile in the +Inf bucket is the highest finite bound. NaN without observations or with
// mismatched sizes.
double HistogramQuantile(double q, std::span<const double> upper_bounds,
                         std::span<const double> cumulative);

// (now - before) / seconds, NaN when seconds <= 0 or the counter went down (a reset).
double RatePerSecond(double before, double now, double seconds);

}  // namespace plumb::status
