#include "tools/call_pacer.h"

#include <algorithm>
#include <cmath>
#include <thread>

#include <grpc/support/time.h>
#include <grpcpp/alarm.h>

namespace plumb::tools {

CallPacer::CallPacer(const PacingOptions& options, Starter start, Completion done)
    : options_(options), start_(std::move(start)), done_(std::move(done)) {}

void CallPacer::Run(LoadClock::time_point begin, LoadClock::time_point end) {
  grpc::CompletionQueue cq;
  if (options_.rate > 0) {
    RunOpen(&cq, begin, end);
  } else {
    std::this_thread::sleep_until(begin);
    RunClosed(&cq, end);
  }
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
  --in_flight_;
}

void CallPacer::RunClosed(grpc::CompletionQueue* cq, LoadClock::time_point end) {
  const uint32_t slots = std::max<uint32_t>(1, options_.concurrency);
  for (uint32_t i = 0; i < slots && LoadClock::now() < end; ++i) {
    start_(cq, LoadClock::now());
    ++started_;
    ++in_flight_;
  }
  void* tag;
  bool ok;
  while (in_flight_ > 0 && cq->Next(&tag, &ok)) {
    Finish(tag);
    const LoadClock::time_point now = LoadClock::now();
    if (now < end) {
      start_(cq, now);
      ++started_;
      ++in_flight_;
    }
  }
}

void CallPacer::RunOpen(grpc::CompletionQueue* cq, LoadClock::time_point begin,
                        LoadClock::time_point end) {
  const std::chrono::duration<double> interval(1.0 / options_.rate);
  const uint32_t cap = std::max<uint32_t>(1, options_.max_outstanding);
  // Slot k starts at begin + (k + phase) * interval; computed from k (not accumulated) so
  // that rounding does not drift over a long run.
  uint64_t next = 0;
  auto slot_time = [&](uint64_t k) {
    return begin + std::chrono::duration_cast<LoadClock::duration>(
                       interval * (static_cast<double>(k) + options_.phase));
  };
  grpc::Alarm alarm;
  void* const alarm_tag = &alarm;
  bool alarm_set = false;
  bool held = false;  // due slots are waiting because `cap` calls are in flight

  // Starts every slot that is due, as far as the cap allows; then arms the alarm for the
  // next slot unless the cap is what holds it back (a completion will resume it then).
  auto start_due = [&] {
    const LoadClock::time_point now = LoadClock::now();
    while (slot_time(next) < end && slot_time(next) <= now) {
      if (in_flight_ >= cap) {
        held = true;
        return;
      }
      if (held) ++delayed_;
      start_(cq, slot_time(next));
      ++started_;
      ++in_flight_;
      ++next;
    }
    held = false;
    if (slot_time(next) < end && !alarm_set) {
      // gRPC timers take their own clocks; a delay on its monotonic clock keeps the
      // schedule immune to wall-clock steps.
      const int64_t delay_ns = std::max<int64_t>(
          0, std::chrono::duration_cast<std::chrono::nanoseconds>(slot_time(next) - LoadClock::now())
                 .count());
      alarm.Set(cq,
                gpr_time_add(gpr_now(GPR_CLOCK_MONOTONIC),
                             gpr_time_from_nanos(delay_ns, GPR_TIMESPAN)),
                alarm_tag);
      alarm_set = true;
    }
  };

  start_due();
  void* tag;
  bool ok;
  while ((alarm_set || in_flight_ > 0) && cq->Next(&tag, &ok)) {
    if (tag == alarm_tag) {
      alarm_set = false;
    } else {
      Finish(tag);
    }
    start_due();
  }
}

}  // namespace plumb::tools
