// bench_server's monitor section: the exposure monitor's cost per Recommend, interleaved
// rounds with and without it (see bench_world.h).
#include <algorithm>
#include <cstdio>
#include <cstdlib>
#include <span>
#include <string>
#include <vector>

#include "bench/server/bench_world.h"
#include "core/percentile.h"
#include "server/exposure_window.h"
#include "server/scorer.h"

namespace plumb::server::bench {

void MonitorSection() {
  const Snapshot& snap = *World();
  Scorer scorer;
  ExposureWindow window(ExposureWindowOptions{});  // the server's defaults
  RankedList out;
  std::vector<uint32_t> indexes;
  const std::vector<std::string> ids = SampledUserIds(4096);
  size_t next = 0;
  // One round: `calls` Recommend calls, each followed (monitor on) by the same Record the
  // service makes (RankerService::RecordExposure). Returns thread CPU seconds per call.
  auto round = [&](bool monitor, int calls) {
    const double start = ThreadCpuSeconds();
    for (int c = 0; c < calls; ++c) {
      RecommendQuery q;
      q.user_id = ids[next++ % ids.size()];
      q.count = kTop;
      q.exclude_seen = true;
      if (!scorer.Recommend(snap, q, &out).ok()) std::abort();
      if (monitor) {
        indexes.clear();
        for (const ScoredIndex& item : out.items) indexes.push_back(item.index);
        window.Record(snap, indexes);
      }
    }
    return (ThreadCpuSeconds() - start) / calls;
  };
  round(true, 300);  // warm-up: the window's per-version arrays are built on first use
  round(false, 300);
  constexpr int kRounds = 41, kCalls = 200;
  std::vector<double> off, on, ratio;
  for (int r = 0; r < kRounds; ++r) {
    // Alternate which side goes first, so a drift in machine load does not favour one.
    double a, b;
    if (r % 2 == 0) {
      a = round(false, kCalls);
      b = round(true, kCalls);
    } else {
      b = round(true, kCalls);
      a = round(false, kCalls);
    }
    off.push_back(a);
    on.push_back(b);
    ratio.push_back(b / a);
  }
  auto median = [](std::vector<double> v) {  // nearest rank: the middle one of 41 rounds
    std::sort(v.begin(), v.end());
    return NearestRankPercentile(std::span<const double>(v), 50);
  };
  // The monitor's own work, isolated: Record of a top-20 list, many times.
  const double record_start = ThreadCpuSeconds();
  constexpr int kRecords = 200000;
  for (int r = 0; r < kRecords; ++r) window.Record(snap, indexes);
  const double record_us = (ThreadCpuSeconds() - record_start) / kRecords * 1e6;
  const double m_off = median(off) * 1e6, m_on = median(on) * 1e6, m_ratio = median(ratio);
  std::printf(
      "\n[monitor] server-side Recommend (top-%u, exclude seen, %u x %u), %d interleaved rounds "
      "of %d calls, thread CPU time\n",
      kTop, kItems, kDim, kRounds, kCalls);
  std::printf("  monitor off        %8.1f us per call (median round)\n", m_off);
  std::printf("  monitor on         %8.1f us per call (median round)\n", m_on);
  std::printf("  on / off           %8.4f median of per-round ratios (%+.2f%%; target < +3%%)\n",
              m_ratio, (m_ratio - 1.0) * 100.0);
  std::printf("  Record alone       %8.3f us per top-%u list\n", record_us, kTop);
}

}  // namespace plumb::server::bench
