#include "server/scan_batcher.h"

#include <algorithm>
#include <condition_variable>
#include <thread>

namespace plumb::server {

// A caller's task and how it is told about the outcome. Lives on the caller's stack for the
// duration of Run.
struct ScanBatcher::Waiter {
  MatrixView items;
  const ScanTask* task = nullptr;
  bool done = false;  // its answer is ready
  bool lead = false;  // it has been handed leadership of the next pass
  std::condition_variable cv;
};

ScanBatcher::ScanBatcher(ScanBatchOptions options) : options_(options) {
  options_.max_batch =
      std::clamp<uint32_t>(options_.max_batch, 1, static_cast<uint32_t>(kMaxScanBatch));
  if (options_.max_concurrent == 0) {
    options_.max_concurrent = std::max(1u, std::thread::hardware_concurrency());
  }
  queue_.reserve(256);
}

Status ScanBatcher::Run(MatrixView items, const ScanTask& task) {
  // Validate alone first: a bad task must fail by itself, not the pass it would join. An
  // empty matrix passes the checks with any scratch; use a minimal one.
  {
    TopKSelector* const selector = task.selector;
    ScanOutcome* const outcome = task.outcome;
    if (selector == nullptr || outcome == nullptr) {
      return Status::InvalidArgument("scan needs a selector and an outcome");
    }
    if (task.query.size() != items.dim) {
      return Status::InvalidArgument("query has " + std::to_string(task.query.size()) +
                                     " dimensions, items have " + std::to_string(items.dim));
    }
  }
  Waiter self;
  self.items = items;
  self.task = &task;
  std::unique_lock<std::mutex> lock(mu_);
  if (running_ < options_.max_concurrent) {
    ++running_;
    Lead(&self, lock);
    return Status::Ok();
  }
  queue_.push_back(&self);
  self.cv.wait(lock, [&] { return self.done || self.lead; });
  if (self.lead) Lead(&self, lock);  // running_ was handed over with the leadership
  return Status::Ok();
}

void ScanBatcher::Lead(Waiter* self, std::unique_lock<std::mutex>& lock) {
  // Take the oldest queued tasks on the same matrix, up to the batch size.
  Waiter* batch[kMaxScanBatch];
  std::size_t size = 0;
  batch[size++] = self;
  auto same_matrix = [&](const Waiter* w) {
    return w->items.data == self->items.data && w->items.rows == self->items.rows &&
           w->items.dim == self->items.dim;
  };
  std::size_t kept = 0;
  for (std::size_t i = 0; i < queue_.size(); ++i) {
    Waiter* w = queue_[i];
    if (size < options_.max_batch && same_matrix(w)) {
      batch[size++] = w;
    } else {
      queue_[kept++] = w;
    }
  }
  queue_.resize(kept);
  ++counts_.passes;
  counts_.queries += size;
  lock.unlock();

  ScanTask tasks[kMaxScanBatch];
  for (std::size_t i = 0; i < size; ++i) tasks[i] = *batch[i]->task;
  thread_local std::vector<float> scratch(kBatchScanScratch);
  // Every task was validated in Run, so the pass cannot fail.
  const Status status = top_k_by_dot_batch(self->items, std::span(tasks, size), scratch);
  (void)status;

  lock.lock();
  for (std::size_t i = 1; i < size; ++i) {
    batch[i]->done = true;
    batch[i]->cv.notify_one();
  }
  self->done = true;
  if (!queue_.empty()) {
    // Hand the running slot to the oldest waiter, which leads the next pass.
    Waiter* next = queue_.front();
    queue_.erase(queue_.begin());
    next->lead = true;
    next->cv.notify_one();
  } else {
    --running_;
  }
}

ScanBatchCounts ScanBatcher::counts() const {
  std::lock_guard<std::mutex> lock(mu_);
  return counts_;
}

}  // namespace plumb::server
