// plumb-train's Prometheus metrics (names agreed in the project's metric list; all start
// with plumb_). Rejections are counted by the ingest service as they happen; everything
// else is copied from running totals (the group committer's counters and the training
// loop's status) by Refresh(), which plumb-train calls about once a second.
//
// Thread safety: all methods may be called from any thread.
#pragma once

#include <array>
#include <cstdint>
#include <memory>
#include <mutex>
#include <string>

#include "trainer/online/event_validation.h"
#include "trainer/online/group_commit.h"
#include "store/store.h"
#include "trainer/online/online_loop.h"
#include "trainer/online/retention_runner.h"

namespace prometheus {
class Counter;
class Gauge;
class Registry;
template <typename T>
class Family;
}  // namespace prometheus

namespace plumb::online {

class TrainMetrics {
 public:
  TrainMetrics();
  TrainMetrics(const TrainMetrics&) = delete;
  TrainMetrics& operator=(const TrainMetrics&) = delete;
  ~TrainMetrics();

  // The registry to expose (status::StatusEndpoint::RegisterCollectable). Shared ownership.
  std::shared_ptr<prometheus::Registry> registry() const { return registry_; }

  // plumb_events_rejected_total{reason} += n.
  void CountRejected(RejectReason reason, uint64_t n = 1);

  // plumb_requests_total{method, code} += 1: one finished EventIngest or ModelControl call
  // (`code` as gRPC spells it, e.g. "INVALID_ARGUMENT").
  void CountCall(const std::string& method, const std::string& code);
  // plumb_undecodable_messages_total{method} += 1: a request or stream message that could
  // not be decoded (e.g. a string field holding invalid UTF-8); its call failed.
  void CountUndecodable(const std::string& method);

  // Brings the totals-fed counters and the gauges up to date. `loop` may be null (ingest
  // without a training loop, in tests). Counters only ever increase: a total lower than
  // the last one seen (cannot happen within one process) is ignored.
  void Refresh(const CommitterStats& committer, const OnlineStatus* loop, int64_t now_ms);

  // The event log's gauges from `log` (Store::GetLogStats) and the retention counters from
  // the runner's totals (`retention` may be null: retention off).
  void RefreshLog(const store::LogStats& log, const RetentionTotals* retention, int64_t now_ms);

  // Current values, for tests and logs.
  double rejected(RejectReason reason) const;
  double accepted() const;
  double duplicates() const;
  double calls(const std::string& method, const std::string& code) const;
  double undecodable(const std::string& method) const;

 private:
  // Adds the increase of a running total to a counter.
  struct TotalFeed {
    prometheus::Counter* counter = nullptr;
    uint64_t seen = 0;
    void Update(uint64_t total);
  };

  std::shared_ptr<prometheus::Registry> registry_;
  std::array<prometheus::Counter*, kNumRejectReasons> rejected_{};
  prometheus::Family<prometheus::Counter>* calls_ = nullptr;        // thread-safe Add
  prometheus::Family<prometheus::Counter>* undecodable_ = nullptr;  // thread-safe Add

  std::mutex mu_;  // guards the feeds and the labelled families below
  TotalFeed accepted_, duplicates_, trained_, passed_, failed_, skipped_;
  TotalFeed write_failures_, failed_events_;
  TotalFeed refits_done_, refits_failed_;
  prometheus::Gauge* refit_running_ = nullptr;
  prometheus::Gauge* refit_seconds_ = nullptr;
  prometheus::Gauge* refit_coverage_ = nullptr;
  prometheus::Gauge* config_pending_ = nullptr;
  prometheus::Family<prometheus::Gauge>* config_family_ = nullptr;
  prometheus::Gauge* config_ = nullptr;
  std::string config_text_;
  TotalFeed samples_;  // labelled by objective, attached on the first Refresh with a loop
  prometheus::Family<prometheus::Counter>* samples_family_ = nullptr;
  prometheus::Family<prometheus::Gauge>* loss_family_ = nullptr;
  prometheus::Gauge* loss_ = nullptr;
  std::string objective_;
  prometheus::Gauge* lag_events_ = nullptr;
  prometheus::Gauge* lag_seconds_ = nullptr;
  prometheus::Gauge* recall_active_ = nullptr;
  prometheus::Gauge* recall_candidate_ = nullptr;
  prometheus::Gauge* active_version_ = nullptr;
  prometheus::Gauge* last_publish_ = nullptr;
  prometheus::Gauge* log_events_ = nullptr;
  prometheus::Gauge* log_bytes_ = nullptr;
  prometheus::Gauge* log_oldest_age_ = nullptr;
  prometheus::Gauge* pair_history_ = nullptr;
  prometheus::Gauge* retention_seconds_ = nullptr;
  TotalFeed retention_removed_, retention_removed_bytes_, retention_passes_, retention_failed_;
};

}  // namespace plumb::online
