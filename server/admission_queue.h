// AdmissionQueue: how many Ranker calls score at once, and how many wait for their turn.
//
// On a machine with few cores, letting every arriving call score at once only slices the
// same cores thinner: every call in flight gets slower together, and under a burst all of
// them miss their deadlines. Instead at most `max_running` calls score; the next
// `max_waiting` wait in arrival order (first in, first out) and each starts as soon as a
// running call ends; a call whose deadline passes while it waits gives up without having
// used any CPU; a call arriving when the waiting line is full is refused at once. The
// service answers those two with DEADLINE_EXCEEDED and RESOURCE_EXHAUSTED and counts them
// like every other answer.
//
// Thread safety: every method may be called from any thread.
#pragma once

#include <chrono>
#include <condition_variable>
#include <cstdint>
#include <list>
#include <mutex>

#include "core/status.h"

namespace plumb::server {

struct AdmissionOptions {
  // Calls that score at the same time; 0 = two per core (measured: one per core gave the
  // lowest p99 but 15-20 % fewer calls/s on 2 cores; sixteen, 25 % more calls/s but twice
  // the p99 at 32 calls in flight).
  int max_running = 0;
  // Calls that wait beyond those; arrivals beyond this are refused (ResourceExhausted).
  int max_waiting = 512;
};

class AdmissionQueue {
 public:
  // Holds a running slot while it lives (or nothing when not admitted). Move-only.
  class Ticket {
   public:
    Ticket() = default;
    Ticket(Ticket&& other) noexcept : queue_(other.queue_) { other.queue_ = nullptr; }
    Ticket& operator=(Ticket&& other) noexcept;
    Ticket(const Ticket&) = delete;
    Ticket& operator=(const Ticket&) = delete;
    ~Ticket();
    bool admitted() const { return queue_ != nullptr; }

   private:
    friend class AdmissionQueue;
    explicit Ticket(AdmissionQueue* queue) : queue_(queue) {}
    AdmissionQueue* queue_ = nullptr;
  };

  // Non-positive max_running means two per core, negative max_waiting
  // means 0.
  explicit AdmissionQueue(AdmissionOptions options = {});
  AdmissionQueue(const AdmissionQueue&) = delete;
  AdmissionQueue& operator=(const AdmissionQueue&) = delete;

  // Takes a running slot, waiting in line for one if all are taken. OK with *ticket holding
  // the slot; ResourceExhausted (message says the limits) when the line is full; Aborted when
  // `deadline` passes before a slot is free. *ticket is not admitted on error.
  Status Enter(std::chrono::system_clock::time_point deadline, Ticket* ticket);

  int max_running() const { return max_running_; }
  int max_waiting() const { return max_waiting_; }
  // Snapshots for metrics.
  int running() const;
  int waiting() const;

 private:
  struct Waiter {
    std::condition_variable wake;
    bool admitted = false;
  };
  void Leave();

  const int max_running_;
  const int max_waiting_;
  mutable std::mutex mu_;
  int running_ = 0;
  std::list<Waiter*> line_;  // front: the longest waiting
};

}  // namespace plumb::server
