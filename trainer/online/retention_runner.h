// Background event-log retention in plumb-train: a thread that runs Store::RetainEvents every
// interval under the configured age and size rules, and keeps the totals that /metrics and
// Status report. A pass removes only events the training loop has committed (the store checks
// the cursor) and writes in chunks beside the ingest path, so ingest is never stopped for it.
//
// Thread safety: every method may be called from any thread.
#pragma once

#include <condition_variable>
#include <cstdint>
#include <mutex>
#include <thread>

#include "core/status.h"
#include "store/store.h"

namespace plumb::online {

struct RetentionOptions {
  int64_t max_age_ms = 0;        // RetentionPolicy::max_age_ms (0: no age rule)
  uint64_t max_log_bytes = 0;    // RetentionPolicy::max_log_bytes (0: no size rule)
  int64_t interval_ms = 60'000;  // time between the end of one pass and the start of the next
  uint32_t events_per_write = 4096;

  bool enabled() const { return max_age_ms > 0 || max_log_bytes > 0; }
};

// What the runner has done since it started.
struct RetentionTotals {
  uint64_t passes = 0;          // passes run (removing something or not)
  uint64_t failed_passes = 0;   // passes that returned an error (logged)
  uint64_t removed_events = 0;  // events removed by this process
  uint64_t removed_bytes = 0;
  double last_pass_seconds = 0.0;
  store::RetentionReport last;  // the last pass's report
};

class RetentionRunner {
 public:
  // `store` must outlive the runner. Nothing runs until Start().
  RetentionRunner(store::Store* store, const RetentionOptions& options);
  RetentionRunner(const RetentionRunner&) = delete;
  RetentionRunner& operator=(const RetentionRunner&) = delete;
  // Stops the thread (waits for a pass in progress).
  ~RetentionRunner();

  // Starts the background thread at niceness `nice` (core/thread_priority.h; 0: the
  // caller's); its first pass runs at once. A no-op when no rule is set.
  void Start(int nice = 0);
  // Stops and joins the thread. Idempotent.
  void Stop();

  // Runs one pass now on the calling thread (tests, and the thread's own loop).
  Status RunOnce(store::RetentionReport* report);

  RetentionTotals totals() const;

 private:
  store::Store* store_;
  const RetentionOptions options_;
  mutable std::mutex mu_;
  std::condition_variable cv_;
  bool stop_ = false;
  RetentionTotals totals_;
  std::thread thread_;
};

}  // namespace plumb::online
