// ServeStatusPage: plumb-serve's status page (/) and its JSON twin (/status.json) on the
// metrics address (issue 15): the serving version and when it was swapped in; served
// exposure per popularity group beside the interaction shares and the version's validation
// target; popularity lift, exposure Gini, coverage, drift (Jensen–Shannon) and the exposure
// shift over the history; request rate, rate of calls not OK and p50/p99 latency over the
// same history; the most-served items with their training degree. No user ids.
//
// The history is a HistoryRing filled by Sample(), which plumb-serve calls from a timer
// every history step (one minute by default); the request path never touches it. Rates and
// latency quantiles are the increase of ServingMetrics' counters and histogram between two
// samples. Pages are rendered when asked for, on the HTTP thread.
//
// Thread safety: Sample, Html and Json may be called concurrently from any threads.
#pragma once

#include <chrono>
#include <cstdint>
#include <memory>
#include <mutex>
#include <nlohmann/json.hpp>
#include <string>
#include <vector>

#include "server/catch_up_loop.h"
#include "server/exposure_window.h"
#include "server/serving_metrics.h"
#include "server/snapshot_holder.h"
#include "status/history_ring.h"

namespace plumb::server {

struct ServeStatusOptions {
  int64_t step_ms = 60000;       // history step (--status-history-step)
  size_t history_points = 1440;  // kept points: 24 h at one a minute
  size_t plot_points = 240;      // at most this many buckets per plot (downsampled)
  size_t top_items = 20;         // most-served items listed
};

class ServeStatusPage {
 public:
  // Sources are borrowed and must outlive the page; `window` is null when the exposure
  // monitor is off (the page then says so), `loop` may be null.
  ServeStatusPage(const SnapshotHolder* holder, const ExposureWindow* window,
                  const ServingMetrics* metrics, const CatchUpLoop* loop,
                  const ServeStatusOptions& options);
  ServeStatusPage(const ServeStatusPage&) = delete;
  ServeStatusPage& operator=(const ServeStatusPage&) = delete;

  // Takes one history point at `now_ms` (ms since the epoch).
  void Sample(int64_t now_ms);

  // The page's data; Html() renders the same object, so the page and /status.json agree.
  nlohmann::json Json(int64_t now_ms) const;
  std::string Html(int64_t now_ms) const;

  const ServeStatusOptions& options() const { return options_; }

 private:
  struct Totals {
    double seconds = 0;  // steady clock
    double requests = 0, not_ok = 0;
    std::vector<double> bounds, cumulative;  // the duration histogram, all methods
  };
  Totals ReadTotals() const;

  const SnapshotHolder* const holder_;
  const ExposureWindow* const window_;
  const ServingMetrics* const metrics_;
  const CatchUpLoop* const loop_;
  const ServeStatusOptions options_;
  status::HistoryRing ring_;
  std::mutex sample_mu_;  // one Sample at a time; guards previous_
  bool have_previous_ = false;
  Totals previous_;
};

}  // namespace plumb::server
