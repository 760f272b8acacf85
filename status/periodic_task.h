// PeriodicTask: runs a function on its own thread at once and then every interval until
// destroyed (the destructor waits for a run in progress). For sampling status-page history
// off the request path.
#pragma once

#include <chrono>
#include <condition_variable>
#include <functional>
#include <mutex>
#include <thread>

namespace plumb::status {

class PeriodicTask {
 public:
  PeriodicTask(std::chrono::milliseconds interval, std::function<void()> run)
      : interval_(interval), run_(std::move(run)), thread_([this] { Loop(); }) {}
  ~PeriodicTask() {
    {
      std::lock_guard<std::mutex> lock(mu_);
      stop_ = true;
    }
    cv_.notify_all();
    thread_.join();
  }
  PeriodicTask(const PeriodicTask&) = delete;
  PeriodicTask& operator=(const PeriodicTask&) = delete;

 private:
  void Loop() {
    auto next = std::chrono::steady_clock::now();
    std::unique_lock<std::mutex> lock(mu_);
    while (!stop_) {
      lock.unlock();
      run_();
      lock.lock();
      next += interval_;
      cv_.wait_until(lock, next, [this] { return stop_; });
    }
  }
  const std::chrono::milliseconds interval_;
  const std::function<void()> run_;
  std::mutex mu_;
  std::condition_variable cv_;
  bool stop_ = false;
  std::thread thread_;  // last: starts after the members it uses exist
};

}  // namespace plumb::status
