#include "tools/zipf_draw.h"

#include <algorithm>
#include <cmath>
#include <numeric>

namespace plumb::tools {

ZipfDraw::ZipfDraw(size_t n, double s, uint64_t seed) {
  n = std::max<size_t>(n, 1);
  cdf_.resize(n);
  double total = 0;
  for (size_t r = 0; r < n; ++r) {
    total += std::pow(static_cast<double>(r + 1), -s);
    cdf_[r] = total;
  }
  for (double& c : cdf_) c /= total;
  cdf_.back() = 1.0;
  order_.resize(n);
  std::iota(order_.begin(), order_.end(), 0u);
  std::mt19937_64 shuffle(seed);
  std::shuffle(order_.begin(), order_.end(), shuffle);
  rank_of_.resize(n);
  for (size_t r = 0; r < n; ++r) rank_of_[order_[r]] = static_cast<uint32_t>(r);
}

size_t ZipfDraw::operator()(std::mt19937_64& rng) const {
  const double u = std::uniform_real_distribution<double>(0.0, 1.0)(rng);
  const size_t rank =
      static_cast<size_t>(std::upper_bound(cdf_.begin(), cdf_.end(), u) - cdf_.begin());
  return order_[std::min(rank, order_.size() - 1)];
}

double ZipfDraw::Probability(size_t index) const {
  const size_t r = rank_of_[index];
  return r == 0 ? cdf_[0] : cdf_[r] - cdf_[r - 1];
}

}  // namespace plumb::tools
