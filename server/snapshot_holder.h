// SnapshotHolder: the one place where the serving snapshot changes.
//
// The catch-up thread Swap()s in a freshly built snapshot; every request Get()s the current
// one once and keeps its shared_ptr to the end, so in-flight requests finish on the version
// they started with and the old snapshot is freed by whichever request releases it last.
// Built on std::atomic<std::shared_ptr<const Snapshot>> (C++20; libstdc++ 12 implements it
// with a lock bit inside the control-block pointer, held only for the pointer copy).
// Beside the snapshot it holds the items withdrawn from serving (WithdrawnItems), which change
// without a new version, and the canary (a candidate snapshot served to a share of the
// subjects, core/canary_bucket.h); the catch-up thread sets all three.
#pragma once

#include <atomic>
#include <memory>
#include <string_view>

#include "core/canary_bucket.h"
#include "server/snapshot.h"
#include "server/withdrawn_items.h"

namespace plumb::server {

// A candidate version served beside the current snapshot.
struct CanaryArm {
  std::shared_ptr<const Snapshot> snapshot;  // never null
  uint32_t share_bp = 0;                     // basis points, 1..10000
};

class SnapshotHolder {
 public:
  SnapshotHolder() = default;
  SnapshotHolder(const SnapshotHolder&) = delete;
  SnapshotHolder& operator=(const SnapshotHolder&) = delete;

  // The current snapshot, or null before the first Swap. Thread-safe.
  std::shared_ptr<const Snapshot> Get() const { return current_.load(std::memory_order_acquire); }

  // Makes `next` current and returns the previous one (null at first). The caller should
  // drop the returned pointer promptly; the memory goes when the last request using it ends.
  // Thread-safe.
  std::shared_ptr<const Snapshot> Swap(std::shared_ptr<const Snapshot> next) {
    return current_.exchange(std::move(next), std::memory_order_acq_rel);
  }

  // The canary, or null when none runs. Thread-safe.
  std::shared_ptr<const CanaryArm> GetCanary() const {
    return canary_.load(std::memory_order_acquire);
  }
  // Starts, changes or (null) ends the canary. Thread-safe.
  void SetCanary(std::shared_ptr<const CanaryArm> next) {
    canary_.store(std::move(next), std::memory_order_release);
  }

  // The snapshot that serves `subject`: the canary's when one runs and the subject's bucket
  // falls in its share (core/canary_bucket.h), the current one otherwise (null before the
  // first Swap). Thread-safe.
  std::shared_ptr<const Snapshot> GetFor(std::string_view subject) const {
    std::shared_ptr<const Snapshot> current = Get();
    if (current == nullptr) return current;
    std::shared_ptr<const CanaryArm> canary = GetCanary();
    if (canary == nullptr || canary->snapshot->version() == current->version()) return current;
    if (!InCanary(subject, canary->snapshot->version(), canary->share_bp)) return current;
    return canary->snapshot;
  }

  // The withdrawn items (null before the first SetWithdrawn: nothing withdrawn). Thread-safe.
  std::shared_ptr<const WithdrawnItems> GetWithdrawn() const {
    return withdrawn_.load(std::memory_order_acquire);
  }
  // Makes `next` the withdrawn set. Thread-safe.
  void SetWithdrawn(std::shared_ptr<const WithdrawnItems> next) {
    withdrawn_.store(std::move(next), std::memory_order_release);
  }

 private:
  std::atomic<std::shared_ptr<const Snapshot>> current_;
  std::atomic<std::shared_ptr<const WithdrawnItems>> withdrawn_;
  std::atomic<std::shared_ptr<const CanaryArm>> canary_;
};

}  // namespace plumb::server
