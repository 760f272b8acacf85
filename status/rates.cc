#include "status/rates.h"

#include <cmath>
#include <limits>

namespace plumb::status {

double HistogramQuantile(double q, std::span<const double> upper_bounds,
                         std::span<const double> cumulative) {
  const double nan = std::numeric_limits<double>::quiet_NaN();
  if (cumulative.size() != upper_bounds.size() + 1 || !(q >= 0 && q <= 1)) return nan;
  const double total = cumulative.back();
  if (!(total > 0)) return nan;
  const double rank = q * total;
  for (size_t b = 0; b < upper_bounds.size(); ++b) {
    if (cumulative[b] >= rank) {
      const double lower_bound = b == 0 ? 0.0 : upper_bounds[b - 1];
      const double lower_count = b == 0 ? 0.0 : cumulative[b - 1];
      const double in_bucket = cumulative[b] - lower_count;
      if (in_bucket <= 0) return upper_bounds[b];
      return lower_bound + (upper_bounds[b] - lower_bound) * (rank - lower_count) / in_bucket;
    }
  }
  return upper_bounds.empty() ? nan : upper_bounds.back();
}

double RatePerSecond(double before, double now, double seconds) {
  if (!(seconds > 0) || now < before) return std::numeric_limits<double>::quiet_NaN();
  return (now - before) / seconds;
}

}  // namespace plumb::status
