#include "server/admission_queue.h"

#include <algorithm>
#include <string>
#include <thread>

namespace plumb::server {

AdmissionQueue::Ticket& AdmissionQueue::Ticket::operator=(Ticket&& other) noexcept {
  if (this != &other) {
    if (queue_ != nullptr) queue_->Leave();
    queue_ = other.queue_;
    other.queue_ = nullptr;
  }
  return *this;
}

AdmissionQueue::Ticket::~Ticket() {
  if (queue_ != nullptr) queue_->Leave();
}

AdmissionQueue::AdmissionQueue(AdmissionOptions options)
    : max_running_(options.max_running > 0
                       ? options.max_running
                       : 2 * static_cast<int>(std::max(1u, std::thread::hardware_concurrency()))),
      max_waiting_(std::max(0, options.max_waiting)) {}

Status AdmissionQueue::Enter(std::chrono::system_clock::time_point deadline, Ticket* ticket) {
  *ticket = Ticket();
  std::unique_lock<std::mutex> lock(mu_);
  if (running_ < max_running_ && line_.empty()) {
    ++running_;
    *ticket = Ticket(this);
    return Status::Ok();
  }
  if (static_cast<int>(line_.size()) >= max_waiting_) {
    return Status::ResourceExhausted("plumb-serve is overloaded: " + std::to_string(running_) +
                                     " calls running and " + std::to_string(line_.size()) +
                                     " waiting (limits " + std::to_string(max_running_) + " and " +
                                     std::to_string(max_waiting_) + "); retry with backoff");
  }
  Waiter me;
  auto place = line_.insert(line_.end(), &me);
  // A call without a deadline has the largest time point, which the wait below cannot
  // convert to the steady clock without overflowing; such a call simply waits its turn.
  const bool unbounded = deadline > std::chrono::system_clock::now() + std::chrono::hours(24 * 365);
  while (!me.admitted) {
    if (unbounded) {
      me.wake.wait(lock);
    } else if (me.wake.wait_until(lock, deadline) == std::cv_status::timeout && !me.admitted) {
      line_.erase(place);
      return Status::Aborted("the deadline passed while the call waited for a free slot (" +
                             std::to_string(running_) + " running, " +
                             std::to_string(line_.size()) + " waiting)");
    }
  }
  // Leave() handed its slot over: running_ already counts this call, and it took us off
  // the line.
  *ticket = Ticket(this);
  return Status::Ok();
}

void AdmissionQueue::Leave() {
  std::lock_guard<std::mutex> lock(mu_);
  if (!line_.empty()) {
    // Hand the slot straight to the longest waiting call: running_ stays the same.
    Waiter* next = line_.front();
    line_.pop_front();
    next->admitted = true;
    next->wake.notify_one();
    return;
  }
  --running_;
}

int AdmissionQueue::running() const {
  std::lock_guard<std::mutex> lock(mu_);
  return running_;
}

int AdmissionQueue::waiting() const {
  std::lock_guard<std::mutex> lock(mu_);
  return static_cast<int>(line_.size());
}

}  // namespace plumb::server
