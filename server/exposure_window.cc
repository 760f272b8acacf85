#include "server/exposure_window.h"

#include <algorithm>
#include <atomic>
#include <chrono>
#include <cmath>
#include <deque>

#include "core/metrics.h"

namespace plumb::server {
namespace {

int64_t SteadyMs() {
  return std::chrono::duration_cast<std::chrono::milliseconds>(
             std::chrono::steady_clock::now().time_since_epoch())
      .count();
}

}  // namespace

struct ExposureWindow::Shard {
  std::mutex mu;
  std::vector<uint64_t> counts;  // per item index, as many as the largest version recorded
  // The lists in this shard's window, oldest first, flattened.
  struct ListRef {
    uint32_t size;
    int64_t time_ms;
    uint64_t number;  // ExposureWindow::recorded_ after this list
  };
  std::deque<ListRef> lists;
  std::deque<uint32_t> items;
  uint64_t slots = 0;

  void DropOldest() {
    const ListRef& l = lists.front();
    for (uint32_t n = 0; n < l.size; ++n) {
      --counts[items.front()];
      items.pop_front();
    }
    slots -= l.size;
    lists.pop_front();
  }
  void DropOlderThan(int64_t cutoff_ms) {
    while (!lists.empty() && lists.front().time_ms < cutoff_ms) DropOldest();
  }
  // Drops the lists numbered `last` or lower (out of the window).
  void DropUpTo(uint64_t last) {
    while (!lists.empty() && lists.front().number <= last) DropOldest();
  }
};

ExposureWindow::ExposureWindow(const ExposureWindowOptions& options) : options_(options) {
  options_.window_lists = std::max<uint32_t>(1, options_.window_lists);
  options_.groups = std::max<uint32_t>(1, options_.groups);
  options_.shards = std::max<uint32_t>(1, options_.shards);
  for (uint32_t s = 0; s < options_.shards; ++s) shards_.push_back(std::make_unique<Shard>());
}

ExposureWindow::~ExposureWindow() = default;

ExposureWindow::Shard& ExposureWindow::ShardForThisThread() {
  static std::atomic<uint32_t> next{0};
  thread_local const uint32_t ticket = next.fetch_add(1, std::memory_order_relaxed);
  return *shards_[ticket % shards_.size()];
}

void ExposureWindow::Record(const Snapshot& snap, std::span<const uint32_t> items) {
  Shard& shard = ShardForThisThread();
  const int64_t now = options_.window_seconds > 0 ? SteadyMs() : 0;
  std::lock_guard<std::mutex> lock(shard.mu);
  // A larger catalogue (a newer version) adds items; what the window holds stays valid.
  if (shard.counts.size() < snap.num_items()) shard.counts.resize(snap.num_items(), 0);
  uint32_t kept = 0;
  for (uint32_t item : items) {
    if (item >= shard.counts.size()) continue;
    ++shard.counts[item];
    shard.items.push_back(item);
    ++kept;
  }
  const uint64_t number = recorded_.fetch_add(1, std::memory_order_relaxed) + 1;
  shard.lists.push_back({kept, now, number});
  shard.slots += kept;
  if (number > options_.window_lists) shard.DropUpTo(number - options_.window_lists);
  if (options_.window_seconds > 0) {
    shard.DropOlderThan(now - static_cast<int64_t>(options_.window_seconds * 1000.0));
  }
}

ExposureFigures ExposureWindow::Summarize(const Snapshot& snap, size_t top_items) const {
  ExposureFigures f;
  f.version = snap.version();
  const uint32_t n = snap.num_items();
  std::vector<uint64_t> counts(n, 0);
  const int64_t cutoff = options_.window_seconds > 0
                             ? SteadyMs() - static_cast<int64_t>(options_.window_seconds * 1000.0)
                             : 0;
  const uint64_t recorded = recorded_.load(std::memory_order_relaxed);
  const uint64_t out_of_window =
      recorded > options_.window_lists ? recorded - options_.window_lists : 0;
  for (const auto& shard_ptr : shards_) {
    Shard& shard = *shard_ptr;
    std::lock_guard<std::mutex> lock(shard.mu);
    shard.DropUpTo(out_of_window);
    if (options_.window_seconds > 0) shard.DropOlderThan(cutoff);
    const size_t known = std::min<size_t>(n, shard.counts.size());
    for (size_t i = 0; i < known; ++i) {
      counts[i] += shard.counts[i];
      f.slots += shard.counts[i];
    }
    f.lists += shard.lists.size();
  }

  std::span<const uint64_t> degrees = snap.item_degrees();
  std::vector<uint64_t> zero_degrees;
  if (degrees.size() != n) {
    zero_degrees.assign(n, 0);
    degrees = zero_degrees;
  }
  {
    std::lock_guard<std::mutex> lock(groups_mu_);
    // Neither call can fail: options_.groups >= 1 (the constructor clamps it), the outputs are
    // not null and degrees, counts and group_of_item_ all hold n entries.
    if (groups_version_ != snap.version() || group_of_item_.size() != n) {
      popularity_groups(degrees, options_.groups, &group_of_item_).IgnoreError();
      groups_version_ = snap.version();
    }
    summarize_exposure(counts, degrees, group_of_item_, options_.groups, &f.summary).IgnoreError();
  }
  if (top_items > 0) {
    for (uint32_t i = 0; i < n; ++i) {
      if (counts[i] > 0) f.top_items.push_back({i, counts[i]});
    }
    const auto more = [](const auto& a, const auto& b) {
      return a.second != b.second ? a.second > b.second : a.first < b.first;
    };
    const size_t keep = std::min(top_items, f.top_items.size());
    std::partial_sort(f.top_items.begin(), f.top_items.begin() + keep, f.top_items.end(), more);
    f.top_items.resize(keep);
  }
  f.served_popularity = f.summary.arp;
  double sum_d = 0.0, sum_d2 = 0.0;
  for (uint64_t d : degrees) {
    sum_d += static_cast<double>(d);
    sum_d2 += static_cast<double>(d) * static_cast<double>(d);
  }
  f.interaction_popularity = sum_d > 0 ? sum_d2 / sum_d : 0.0;
  f.lift = (f.slots > 0 && f.interaction_popularity > 0)
               ? f.served_popularity / f.interaction_popularity
               : std::nan("");
  return f;
}

}  // namespace plumb::server
