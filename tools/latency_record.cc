#include "tools/latency_record.h"

#include <algorithm>
#include <cmath>
#include <span>

#include "core/percentile.h"

namespace plumb::tools {

LatencyRecord::LatencyRecord(size_t max_samples, uint64_t seed)
    : max_samples_(std::max<size_t>(1, max_samples)), rng_(seed) {}

void LatencyRecord::Add(int64_t ns) {
  ns = std::max<int64_t>(ns, 0);
  if (count_ == 0) {
    min_ = max_ = ns;
  } else {
    min_ = std::min(min_, ns);
    max_ = std::max(max_, ns);
  }
  ++count_;
  sum_ += ns;
  sorted_ = false;
  if (samples_.size() < max_samples_) {
    samples_.push_back(ns);
    return;
  }
  // Algorithm R: the count_-th call replaces a kept sample with probability max/count_.
  const uint64_t slot = std::uniform_int_distribution<uint64_t>(0, count_ - 1)(rng_);
  if (slot < max_samples_) samples_[slot] = ns;
}

int64_t LatencyRecord::Percentile(double p) {
  if (samples_.empty()) return 0;
  if (!sorted_) {
    std::sort(samples_.begin(), samples_.end());
    sorted_ = true;
  }
  return NearestRankPercentile(std::span<const int64_t>(samples_), p);
}

LatencySummary LatencyRecord::Summarize() {
  LatencySummary s;
  s.count = count_;
  s.kept = samples_.size();
  if (count_ == 0) return s;
  s.min_ns = min_;
  s.max_ns = max_;
  s.mean_ns = static_cast<double>(sum_ / static_cast<long double>(count_));
  s.p50_ns = Percentile(50);
  s.p90_ns = Percentile(90);
  s.p99_ns = Percentile(99);
  s.p999_ns = Percentile(99.9);
  return s;
}

}  // namespace plumb::tools
