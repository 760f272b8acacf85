#include "status/history_ring.h"

#include <algorithm>
#include <cmath>
#include <limits>

namespace plumb::status {

int HistoryView::Find(const std::string& name) const {
  for (size_t i = 0; i < names.size(); ++i) {
    if (names[i] == name) return static_cast<int>(i);
  }
  return -1;
}

HistoryRing::HistoryRing(std::vector<std::string> series, size_t capacity)
    : names_(std::move(series)), capacity_(std::max<size_t>(1, capacity)) {
  times_.assign(capacity_, 0);
  values_.assign(capacity_ * std::max<size_t>(1, names_.size()), 0.0);
}

Status HistoryRing::Add(int64_t time_ms, std::span<const double> values) {
  if (values.size() != names_.size()) {
    return Status::InvalidArgument("a history point needs " + std::to_string(names_.size()) +
                                   " values, got " + std::to_string(values.size()));
  }
  std::lock_guard<std::mutex> lock(mu_);
  if (size_ > 0 && time_ms < times_[(head_ + size_ - 1) % capacity_]) {
    return Status::InvalidArgument("history point older than the newest one");
  }
  size_t slot;
  if (size_ < capacity_) {
    slot = (head_ + size_) % capacity_;
    ++size_;
  } else {
    slot = head_;
    head_ = (head_ + 1) % capacity_;
  }
  times_[slot] = time_ms;
  for (size_t s = 0; s < values.size(); ++s) {
    values_[slot * names_.size() + s] =
        std::isfinite(values[s]) ? values[s] : std::numeric_limits<double>::quiet_NaN();
  }
  ++added_;
  return Status::Ok();
}

size_t HistoryRing::size() const {
  std::lock_guard<std::mutex> lock(mu_);
  return size_;
}

HistoryView HistoryRing::Read(size_t max_points) const {
  max_points = std::max<size_t>(1, max_points);
  HistoryView v;
  v.names = names_;
  const size_t series = names_.size();
  v.mean.resize(series);
  v.min.resize(series);
  v.max.resize(series);
  std::lock_guard<std::mutex> lock(mu_);
  v.added = added_;
  const size_t n = size_;
  if (n == 0) return v;
  const size_t width = (n + max_points - 1) / max_points;
  const size_t buckets = (n + width - 1) / width;
  // The first bucket takes the remainder so that the newest point closes the last one.
  const size_t first = n - (buckets - 1) * width;
  const double nan = std::numeric_limits<double>::quiet_NaN();
  size_t begin = 0;
  for (size_t b = 0; b < buckets; ++b) {
    const size_t end = b == 0 ? first : begin + width;
    v.time_ms.push_back(times_[(head_ + end - 1) % capacity_]);
    v.points.push_back(static_cast<uint32_t>(end - begin));
    for (size_t s = 0; s < series; ++s) {
      double sum = 0.0, lo = nan, hi = nan;
      size_t finite = 0;
      for (size_t i = begin; i < end; ++i) {
        const double x = values_[((head_ + i) % capacity_) * series + s];
        if (std::isnan(x)) continue;
        sum += x;
        lo = finite == 0 ? x : std::min(lo, x);
        hi = finite == 0 ? x : std::max(hi, x);
        ++finite;
      }
      v.mean[s].push_back(finite > 0 ? sum / static_cast<double>(finite) : nan);
      v.min[s].push_back(lo);
      v.max[s].push_back(hi);
    }
    begin = end;
  }
  return v;
}

}  // namespace plumb::status
