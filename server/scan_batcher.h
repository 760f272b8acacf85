// ScanBatcher: lets concurrent Recommend calls share one pass over the item matrix.
//
// Why: a full scan of 100k x 64 floats reads 25.6 MB. One scan alone runs near the memory
// bandwidth of a core; two cores scanning at once contend for the same memory bus and each
// slows down, so under concurrent load the server spends most of its time waiting on memory.
// A batched pass (core/scan.h, top_k_by_dot_batch) reads each block once for several queries.
//
// How: a caller that finds fewer than max_concurrent passes running leads a pass at once, so
// a quiet server adds no wait to any request. Otherwise it queues. When a pass ends, its
// leader hands leadership to the oldest queued caller, which takes up to max_batch queued
// tasks on the same matrix (the same snapshot) into its pass. Each caller's result is exactly
// what top_k_by_dot alone would give (same arithmetic, bit for bit).
//
// Thread-safe. Allocates nothing in steady state (the queue keeps its capacity; a leader's
// score buffers are thread-local). Not copyable.
#pragma once

#include <cstddef>
#include <cstdint>
#include <mutex>
#include <vector>

#include "core/aligned.h"
#include "core/scan.h"
#include "core/status.h"

namespace plumb::server {

struct ScanBatchOptions {
  // Queries one pass answers at most, 1..kMaxScanBatch. 1 turns batching off: every call
  // scans alone, as many at once as there are callers.
  uint32_t max_batch = 8;
  // Passes running at once; 0 = one per hardware thread. Further callers wait and join the
  // next pass.
  uint32_t max_concurrent = 0;
};

// Cumulative counts, for the metrics page.
struct ScanBatchCounts {
  uint64_t passes = 0;   // passes run
  uint64_t queries = 0;  // tasks answered by them (queries / passes = mean batch size)
};

class ScanBatcher {
 public:
  // Options outside their ranges are clamped (max_batch to 1..kMaxScanBatch).
  explicit ScanBatcher(ScanBatchOptions options = {});
  ScanBatcher(const ScanBatcher&) = delete;
  ScanBatcher& operator=(const ScanBatcher&) = delete;

  // Answers task over items, alone or in a pass shared with other callers; blocks until its
  // answer is in task.selector / task.outcome. The task (and what it references) must stay
  // valid until Run returns. Errors: those of top_k_by_dot_batch for this task (checked
  // before queueing, so one bad task never fails another caller's pass).
  Status Run(MatrixView items, const ScanTask& task);

  ScanBatchCounts counts() const;
  const ScanBatchOptions& options() const { return options_; }

 private:
  struct Waiter;
  // Runs the pass led by `self` (which is already counted in running_), then hands over.
  void Lead(Waiter* self, std::unique_lock<std::mutex>& lock);

  ScanBatchOptions options_;
  mutable std::mutex mu_;
  std::vector<Waiter*> queue_;  // oldest first
  uint32_t running_ = 0;        // passes in progress (each has a leader)
  ScanBatchCounts counts_;
};

}  // namespace plumb::server
