// CallPacer: keeps asynchronous gRPC calls going on one completion queue at a chosen pace,
// either closed-loop (a fixed number of calls always in flight: the next starts when one
// finishes) or open-loop (calls start on a fixed schedule, whether earlier ones finished or
// not). plumb-load runs one pacer per completion-queue thread for the queries and one for
// the events it publishes.
//
// Open loop and "coordinated omission": every call carries the time it was *scheduled* to
// start. When the pacer cannot start a call on time (its thread was late, or
// max_outstanding calls were already in flight), the call starts late but keeps its
// scheduled time, so the latency measured from that time includes the wait a real client
// would have seen. This is common practice in load generators that report tail latency
// (the correction HdrHistogram's documentation describes); closed-loop runs have no
// schedule and measure from the actual start.
//
// Open-loop calls are started by a dispatcher thread that sleeps until each slot, while the
// calling thread drains the completion queue. gRPC's own timers (grpc::Alarm, AsyncNext
// deadlines) fire on a millisecond tick, measured here as 0.5 to 1.5 ms late, which would
// add that much to every open-loop latency; a plain sleep is late by tens of microseconds
// (and start_lag() reports by how much).
#pragma once

#include <grpcpp/client_context.h>
#include <grpcpp/completion_queue.h>
#include <grpcpp/support/status.h>

#include <atomic>
#include <chrono>
#include <cstdint>
#include <functional>

#include "tools/latency_record.h"

namespace plumb::tools {

using LoadClock = std::chrono::steady_clock;

// One call in flight. A starter creates it, starts the RPC with the call itself as the
// completion-queue tag and `status` as the Finish() target; the pacer deletes it after the
// completion hook has seen it.
struct PendingCall {
  virtual ~PendingCall() = default;
  grpc::ClientContext context;
  grpc::Status status;
  LoadClock::time_point scheduled;  // open loop: the slot; closed loop: the actual start
};

struct PacingOptions {
  // Open loop when rate > 0: calls started per second by this pacer. Otherwise closed loop
  // with `concurrency` calls in flight (at least 1).
  double rate = 0;
  uint32_t concurrency = 1;
  // Open loop: offset of the first slot as a fraction of the interval 1/rate in [0, 1), so
  // that several pacers sharing a total rate interleave instead of firing together.
  double phase = 0;
  // Open loop: at most this many calls in flight; later slots wait (and count as delayed).
  uint32_t max_outstanding = 10000;
};

class CallPacer {
 public:
  // Starts one call on `cq` scheduled for `scheduled` and returns it (ownership passes to
  // the pacer). Must not block. Always called from one thread (the dispatcher in open loop,
  // the caller of Run() in closed loop), never concurrently with itself.
  using Starter =
      std::function<PendingCall*(grpc::CompletionQueue* cq, LoadClock::time_point scheduled)>;
  // Sees a finished call (its status filled) and the time it finished. Always called from
  // the thread that called Run(), never concurrently with itself; in open loop it runs
  // concurrently with the Starter, so the two must not share unguarded state.
  using Completion = std::function<void(PendingCall* call, LoadClock::time_point finished)>;

  CallPacer(const PacingOptions& options, Starter start, Completion done);
  CallPacer(const CallPacer&) = delete;
  CallPacer& operator=(const CallPacer&) = delete;

  // Starts calls from `begin` until `end`, then waits for the calls still in flight
  // (bounded by their deadlines, which starters must set) and returns. Call once.
  void Run(LoadClock::time_point begin, LoadClock::time_point end);

  // Calls started (over the whole run). Read after Run().
  uint64_t started() const { return started_; }
  // Open loop: calls that started later than their slot because max_outstanding calls were
  // in flight. Read after Run().
  uint64_t delayed() const { return delayed_; }
  // Open loop: how late calls started relative to their slots (the generator's own
  // timing error plus waits for max_outstanding). Empty in closed loop. Read after Run().
  LatencySummary start_lag() { return start_lag_.Summarize(); }

 private:
  void RunClosed(grpc::CompletionQueue* cq, LoadClock::time_point end);
  void Dispatch(grpc::CompletionQueue* cq, LoadClock::time_point begin, LoadClock::time_point end);
  void Finish(void* tag);

  PacingOptions options_;
  Starter start_;
  Completion done_;
  uint64_t started_ = 0;
  uint64_t delayed_ = 0;
  std::atomic<uint64_t> in_flight_{0};
  LatencyRecord start_lag_{size_t{1} << 20};
};

}  // namespace plumb::tools
