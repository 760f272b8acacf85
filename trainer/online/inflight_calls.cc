#include "trainer/online/inflight_calls.h"

namespace plumb::online {

InflightCalls::Scope InflightCalls::Enter() {
  std::lock_guard<std::mutex> lock(mu_);
  if (closed_) return Scope(nullptr, false);
  ++running_;
  return Scope(this, true);
}

void InflightCalls::Leave() {
  std::lock_guard<std::mutex> lock(mu_);
  if (--running_ == 0) idle_.notify_all();
}

bool InflightCalls::CloseAndWait(std::chrono::steady_clock::time_point deadline) {
  std::unique_lock<std::mutex> lock(mu_);
  closed_ = true;
  return idle_.wait_until(lock, deadline, [this] { return running_ == 0; });
}

int InflightCalls::running() const {
  std::lock_guard<std::mutex> lock(mu_);
  return running_;
}

}  // namespace plumb::online
