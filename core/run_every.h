// RunEvery: the loop of a background thread that does one round now and then one every
// interval until it is told to stop.
#pragma once

#include <chrono>
#include <condition_variable>
#include <mutex>

namespace plumb {

// Calls round() (without holding mu), then waits `interval` or until woken with *stopping
// true, and again, until *stopping is true. *stopping is read under mu; whoever sets it sets
// it under mu and then notifies wake. Returns with mu not held.
template <typename Round>
void RunEvery(std::mutex& mu, std::condition_variable& wake, const bool& stopping,
              std::chrono::milliseconds interval, Round round) {
  std::unique_lock<std::mutex> lock(mu);
  while (!stopping) {
    lock.unlock();
    round();
    lock.lock();
    wake.wait_for(lock, interval, [&stopping] { return stopping; });
  }
}

}  // namespace plumb
