// IdleReplayBudget: how many replay samples the online loop may still train on once the log
// is consumed, so that a quiet stream still converges without training forever. New data
// refills it to about `passes` passes over the training pairs (counted in samples); each idle
// step takes a batch from it. A loop with background refits clears it: a refit does what
// idle replay would.
//
// Not thread-safe: the training thread owns it.
#pragma once

#include <algorithm>
#include <cstdint>

namespace plumb::online {

class IdleReplayBudget {
 public:
  explicit IdleReplayBudget(double passes) : passes_(passes) {}

  // After new data: passes x train_pairs samples, replacing what was left.
  void Refill(uint64_t train_pairs) {
    left_ = static_cast<uint64_t>(passes_ * static_cast<double>(train_pairs));
  }
  // Takes up to `at_most` samples (fewer when less is left) and returns how many.
  uint64_t Take(uint64_t at_most) {
    const uint64_t n = std::min(at_most, left_);
    left_ -= n;
    return n;
  }
  void Clear() { left_ = 0; }
  bool empty() const { return left_ == 0; }

 private:
  double passes_;
  uint64_t left_ = 0;
};

}  // namespace plumb::online
