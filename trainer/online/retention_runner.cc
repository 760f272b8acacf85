#include "trainer/online/retention_runner.h"

#include <spdlog/spdlog.h>

#include <chrono>

#include "core/thread_priority.h"

namespace plumb::online {

RetentionRunner::RetentionRunner(store::Store* store, const RetentionOptions& options)
    : store_(store), options_(options) {}

RetentionRunner::~RetentionRunner() { Stop(); }

void RetentionRunner::Start(int nice) {
  if (!options_.enabled() || thread_.joinable()) return;
  thread_ = std::thread([this, nice] {
    LowerThisThreadsPriority(nice);
    std::unique_lock<std::mutex> lock(mu_);
    while (!stop_) {
      lock.unlock();
      store::RetentionReport report;
      Status s = RunOnce(&report);
      if (!s.ok()) {
        spdlog::error("event-log retention failed: {}", s.ToString());
      } else if (report.removed_events > 0) {
        spdlog::info("event-log retention removed {} events ({} bytes) in {:.2f}s; stopped at {}",
                     report.removed_events, report.removed_bytes, report.seconds,
                     report.stopped_by);
      }
      lock.lock();
      cv_.wait_for(lock, std::chrono::milliseconds(options_.interval_ms), [this] { return stop_; });
    }
  });
}

void RetentionRunner::Stop() {
  {
    std::lock_guard<std::mutex> lock(mu_);
    stop_ = true;
  }
  cv_.notify_all();
  if (thread_.joinable()) thread_.join();
}

Status RetentionRunner::RunOnce(store::RetentionReport* report) {
  store::RetentionPolicy policy;
  policy.max_age_ms = options_.max_age_ms;
  policy.max_log_bytes = options_.max_log_bytes;
  policy.events_per_write = options_.events_per_write;
  Status s = store_->RetainEvents(policy, report);
  std::lock_guard<std::mutex> lock(mu_);
  ++totals_.passes;
  if (!s.ok()) {
    ++totals_.failed_passes;
    return s;
  }
  totals_.removed_events += report->removed_events;
  totals_.removed_bytes += report->removed_bytes;
  totals_.last_pass_seconds = report->seconds;
  totals_.last = *report;
  return s;
}

RetentionTotals RetentionRunner::totals() const {
  std::lock_guard<std::mutex> lock(mu_);
  return totals_;
}

}  // namespace plumb::online
