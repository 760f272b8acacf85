// ServingMetrics: plumb-serve's Prometheus metrics (DESIGN.md §6).
//
// Request counts and latencies are recorded by the service as requests finish; the model
// version, its age, swap and load-failure counts and the served-exposure counters are read
// from their owners (SnapshotHolder, CatchUpLoop, ExposureCounter) at scrape time, so that
// nothing has to remember to update them. Register the object with a status::StatusEndpoint
// (or call Collect() directly in tests).
//
// Exposed:
//   plumb_requests_total{method,code}            counter  finished Ranker calls by gRPC code
//   plumb_request_duration_seconds{method}       histogram  server-side time per call,
//                                                 buckets 100 µs .. 100 ms
//   plumb_model_version                          gauge    serving version (0 before the first)
//   plumb_model_age_seconds                      gauge    now minus the version's creation
//   plumb_snapshot_swaps_total                   counter  snapshots swapped in
//   plumb_snapshot_load_failures_total           counter  versions that failed to load
//   plumb_store_damaged                          gauge    1 while a table file is missing or
//                                                 damaged (CatchUpLoop's file check)
//   plumb_rejected_calls_total{method,reason}    counter  calls refused before scoring:
//                                                 reason queue_full (AdmissionQueue's line
//                                                 was full), deadline_in_queue (the deadline
//                                                 passed while waiting), thread_pool (gRPC had
//                                                 no thread for the call; any method)
//   plumb_requests_running                       gauge    Ranker calls scoring now
//   plumb_requests_waiting                       gauge    Ranker calls waiting for a slot
//   plumb_served_lists_total                     counter  lists served (ExposureCounter)
//   plumb_served_slots_total                     counter  items in those lists
#pragma once

#include <grpcpp/support/status.h>
#include <prometheus/collectable.h>
#include <prometheus/counter.h>
#include <prometheus/family.h>
#include <prometheus/histogram.h>
#include <prometheus/registry.h>

#include <array>
#include <atomic>
#include <memory>
#include <string_view>
#include <vector>

#include "server/catch_up_loop.h"
#include "server/exposure_sink.h"
#include "server/snapshot_holder.h"

namespace plumb::server {

enum class RankerMethod : int { kRecommend = 0, kRankCandidates = 1, kSimilarItems = 2 };

// Why a call was refused before it was scored.
enum class Rejection : int { kQueueFull = 0, kDeadlineInQueue = 1, kThreadPool = 2 };

class AdmissionQueue;

class ServingMetrics final : public prometheus::Collectable {
 public:
  // The sources are borrowed and may be null (their metrics are then omitted); they must
  // outlive this object, or at least every Collect() call.
  ServingMetrics(const SnapshotHolder* holder, const CatchUpLoop* loop,
                 const ExposureCounter* exposure);
  ServingMetrics(const ServingMetrics&) = delete;
  ServingMetrics& operator=(const ServingMetrics&) = delete;

  // Records one finished call. Thread-safe; allocates only the first time a (method, code)
  // pair is seen.
  void ObserveRequest(RankerMethod method, grpc::StatusCode code, double seconds);

  // Records a refused call. `method` is gRPC's full name ("/plumb.v1.Ranker/Recommend") or
  // a Ranker method's short one ("Recommend"). A Ranker call refused by gRPC itself
  // (kThreadPool) is also counted in plumb_requests_total as RESOURCE_EXHAUSTED: the
  // service never saw it. Thread-safe.
  void ObserveRejection(std::string_view method, Rejection reason);

  // The queue whose occupancy the gauges show (borrowed; null = no gauges). Call before the
  // first Collect().
  void set_admission(const AdmissionQueue* queue) { admission_ = queue; }

  // All families above. Thread-safe (called by the metrics endpoint's HTTP threads).
  std::vector<prometheus::MetricFamily> Collect() const override;

 private:
  static constexpr int kMethods = 3;
  static constexpr int kCodes = 17;  // grpc::StatusCode values 0..16

  prometheus::Counter& RequestCounter(RankerMethod method, grpc::StatusCode code);

  const SnapshotHolder* const holder_;
  const CatchUpLoop* const loop_;
  const ExposureCounter* const exposure_;
  const AdmissionQueue* admission_ = nullptr;
  std::shared_ptr<prometheus::Registry> registry_;
  prometheus::Family<prometheus::Counter>* requests_;
  prometheus::Family<prometheus::Counter>* rejections_;
  std::array<prometheus::Histogram*, kMethods> durations_{};
  std::array<std::atomic<prometheus::Counter*>, kMethods * kCodes> counters_{};
};

}  // namespace plumb::server
