// TrainStatusPage: plumb-train's status page (/) and its JSON twin (/status.json) on the
// metrics address (issue 15): log sequence against trained sequence (the lag) over time,
// events per second accepted, duplicate and rejected by reason, training loss and samples
// per second, and the version history as a timeline (created, gate outcome and reason,
// validation recall, training configuration, active marker) with the plumb-query commands
// that promote or roll back shown as text. The page changes nothing.
//
// The history is a HistoryRing filled by Sample(), called from a timer every history step;
// the ingest and training paths never touch it. The version list is read from the store when
// the page is asked for.
//
// Thread safety: Sample, Html and Json may be called concurrently from any threads.
#pragma once

#include <cstdint>
#include <mutex>
#include <nlohmann/json.hpp>
#include <string>
#include <vector>

#include "status/history_ring.h"
#include "store/store.h"
#include "trainer/online/online_loop.h"
#include "trainer/online/train_metrics.h"

namespace plumb::online {

struct TrainStatusOptions {
  int64_t step_ms = 60000;       // history step (status_history_step)
  size_t history_points = 1440;  // kept points: 24 h at one a minute
  size_t plot_points = 240;      // at most this many buckets per plot (downsampled)
  std::string trainer_address;   // shown in the plumb-query commands (plumb-train's listen)
  size_t groups = 5;             // popularity groups of the versions' validation shares
};

class TrainStatusPage {
 public:
  // All borrowed; must outlive the page. `metrics` is read for the event counters.
  TrainStatusPage(const store::Store* store, const OnlineLoop* loop, const TrainMetrics* metrics,
                  const TrainStatusOptions& options);
  TrainStatusPage(const TrainStatusPage&) = delete;
  TrainStatusPage& operator=(const TrainStatusPage&) = delete;

  void Sample(int64_t now_ms);

  nlohmann::json Json(int64_t now_ms) const;
  std::string Html(int64_t now_ms) const;

 private:
  struct Totals {
    double seconds = 0;
    double accepted = 0, duplicates = 0, samples = 0;
    std::vector<double> rejected;  // per RejectReason
  };
  Totals ReadTotals(const OnlineStatus& status) const;

  const store::Store* const store_;
  const OnlineLoop* const loop_;
  const TrainMetrics* const metrics_;
  const TrainStatusOptions options_;
  status::HistoryRing ring_;
  std::mutex sample_mu_;
  bool have_previous_ = false;
  Totals previous_;
};

}  // namespace plumb::online
