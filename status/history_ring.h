// HistoryRing: a bounded, in-memory history of a fixed set of numeric series, one point per
// step (a status page's "last 24 hours" at one point a minute). A timer adds the points; the
// request path never touches the ring. Nothing survives a restart.
//
// Memory is bounded: at most `capacity` points are kept, the oldest is dropped first, and the
// storage is allocated once in the constructor (capacity × series doubles).
//
// Read(max_points) returns the history downsampled to at most max_points buckets: buckets of
// w = ceil(n / max_points) consecutive points, aligned so that the newest point closes the
// last bucket (the oldest bucket may hold fewer). A bucket reports, per series, the mean,
// minimum and maximum of its finite values (NaN when it has none) and the time of its newest
// point. With n <= max_points every point is its own bucket, unchanged.
//
// Thread-safe: Add and Read may be called concurrently from any threads.
#pragma once

#include <cstdint>
#include <mutex>
#include <span>
#include <string>
#include <vector>

#include "core/status.h"

namespace plumb::status {

// What Read() returns. Every vector of values has one entry per bucket.
struct HistoryView {
  std::vector<std::string> names;                   // the series, as given to the ring
  std::vector<int64_t> time_ms;                     // newest point of each bucket
  std::vector<uint32_t> points;                     // points folded into each bucket
  std::vector<std::vector<double>> mean, min, max;  // [series][bucket]
  uint64_t added = 0;                               // points ever added (dropped ones too)

  // Index of a series by name, or -1.
  int Find(const std::string& name) const;
};

class HistoryRing {
 public:
  // `series` names the values of every point (at least one); capacity >= 1.
  HistoryRing(std::vector<std::string> series, size_t capacity);
  HistoryRing(const HistoryRing&) = delete;
  HistoryRing& operator=(const HistoryRing&) = delete;

  // Appends a point, dropping the oldest when full. Non-finite values are kept as NaN
  // ("not measured"). InvalidArgument (nothing added) when values.size() differs from the
  // number of series or time_ms is older than the newest point.
  Status Add(int64_t time_ms, std::span<const double> values);

  // The kept points, oldest first, downsampled to at most max_points (>= 1) buckets.
  HistoryView Read(size_t max_points) const;

  size_t size() const;
  size_t capacity() const { return capacity_; }
  size_t num_series() const { return names_.size(); }

 private:
  const std::vector<std::string> names_;
  const size_t capacity_;
  mutable std::mutex mu_;
  std::vector<int64_t> times_;  // capacity_ slots
  std::vector<double> values_;  // capacity_ × series, slot-major
  size_t head_ = 0;             // slot of the oldest point
  size_t size_ = 0;
  uint64_t added_ = 0;
};

}  // namespace plumb::status
