#include "tools/call_pacer.h"

#include <sys/prctl.h>

#include <algorithm>
#include <thread>

namespace plumb::tools {

CallPacer::CallPacer(const PacingOptions& options, Starter start, Completion done)
    : options_(options), start_(std::move(start)), done_(std::move(done)) {}

void CallPacer::Run(LoadClock::time_point begin, LoadClock::time_point end) {
  grpc::CompletionQueue cq;
  if (options_.rate > 0) {
    std::thread dispatcher([&] {
      Dispatch(&cq, begin, end);
      // No call is started after this; Next() returns the remaining completions, then
      // false once the queue is empty.
      cq.Shutdown();
    });
    void* tag;
    bool ok;
    while (cq.Next(&tag, &ok)) Finish(tag);
    dispatcher.join();
    return;
  }
  std::this_thread::sleep_until(begin);
  RunClosed(&cq, end);
  cq.Shutdown();
  void* tag;
  bool ok;
  while (cq.Next(&tag, &ok)) {
  }
}

void CallPacer::Finish(void* tag) {
  PendingCall* call = static_cast<PendingCall*>(tag);
  done_(call, LoadClock::now());
  delete call;
  in_flight_.fetch_sub(1, std::memory_order_release);
}

void CallPacer::RunClosed(grpc::CompletionQueue* cq, LoadClock::time_point end) {
  const uint32_t slots = std::max<uint32_t>(1, options_.concurrency);
  for (uint32_t i = 0; i < slots && LoadClock::now() < end; ++i) {
    start_(cq, LoadClock::now());
    ++started_;
    in_flight_.fetch_add(1, std::memory_order_relaxed);
  }
  void* tag;
  bool ok;
  while (in_flight_.load(std::memory_order_acquire) > 0 && cq->Next(&tag, &ok)) {
    Finish(tag);
    const LoadClock::time_point now = LoadClock::now();
    if (now < end) {
      start_(cq, now);
      ++started_;
      in_flight_.fetch_add(1, std::memory_order_relaxed);
    }
  }
}

void CallPacer::Dispatch(grpc::CompletionQueue* cq, LoadClock::time_point begin,
                         LoadClock::time_point end) {
  // The kernel may defer a sleeper's wake-up by the thread's timer slack (50 us by
  // default) to batch wake-ups; the schedule wants it on time.
  prctl(PR_SET_TIMERSLACK, 1UL, 0UL, 0UL, 0UL);
  const std::chrono::duration<double> interval(1.0 / options_.rate);
  const uint64_t cap = std::max<uint32_t>(1, options_.max_outstanding);
  // Slot k starts at begin + (k + phase) * interval, computed from k (not accumulated) so
  // that rounding does not drift over a long run.
  for (uint64_t k = 0;; ++k) {
    const LoadClock::time_point slot =
        begin + std::chrono::duration_cast<LoadClock::duration>(
                    interval * (static_cast<double>(k) + options_.phase));
    if (slot >= end) break;
    std::this_thread::sleep_until(slot);
    if (in_flight_.load(std::memory_order_acquire) >= cap) {
      ++delayed_;
      // Completions run on the other thread; a short poll keeps this simple and costs
      // nothing measurable next to a saturated server.
      while (in_flight_.load(std::memory_order_acquire) >= cap) {
        std::this_thread::sleep_for(std::chrono::microseconds(50));
      }
    }
    start_lag_.Add(
        std::chrono::duration_cast<std::chrono::nanoseconds>(LoadClock::now() - slot).count());
    in_flight_.fetch_add(1, std::memory_order_relaxed);
    start_(cq, slot);
    ++started_;
  }
}

}  // namespace plumb::tools
