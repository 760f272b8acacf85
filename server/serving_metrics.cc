#include "server/serving_metrics.h"

#include <chrono>
#include <string>

#include "server/admission_queue.h"

namespace plumb::server {

namespace {

const char* const kMethodNames[] = {"Recommend", "RankCandidates", "SimilarItems"};

// The canonical gRPC code names, as gRPC's own documentation spells them.
const char* const kCodeNames[] = {
    "OK",        "CANCELLED",      "UNKNOWN",           "INVALID_ARGUMENT",   "DEADLINE_EXCEEDED",
    "NOT_FOUND", "ALREADY_EXISTS", "PERMISSION_DENIED", "RESOURCE_EXHAUSTED", "FAILED_PRECONDITION",
    "ABORTED",   "OUT_OF_RANGE",   "UNIMPLEMENTED",     "INTERNAL",           "UNAVAILABLE",
    "DATA_LOSS", "UNAUTHENTICATED"};

prometheus::MetricFamily Single(const char* name, const char* help, prometheus::MetricType type,
                                double value) {
  prometheus::MetricFamily family;
  family.name = name;
  family.help = help;
  family.type = type;
  prometheus::ClientMetric metric;
  if (type == prometheus::MetricType::Counter) {
    metric.counter.value = value;
  } else {
    metric.gauge.value = value;
  }
  family.metric.push_back(std::move(metric));
  return family;
}

}  // namespace

// Label values of plumb_rejected_calls_total, indexed by Rejection.
constexpr const char* kRejectionReasons[] = {"queue_full", "deadline_in_queue", "thread_pool"};

ServingMetrics::ServingMetrics(const SnapshotHolder* holder, const CatchUpLoop* loop,
                               const ExposureCounter* exposure)
    : holder_(holder),
      loop_(loop),
      exposure_(exposure),
      registry_(std::make_shared<prometheus::Registry>()) {
  requests_ = &prometheus::BuildCounter()
                   .Name("plumb_requests_total")
                   .Help("Finished Ranker calls by method and gRPC status code")
                   .Register(*registry_);
  rejections_ = &prometheus::BuildCounter()
                     .Name("plumb_rejected_calls_total")
                     .Help(
                         "Calls refused before scoring, by method and reason (queue_full, "
                         "deadline_in_queue, thread_pool)")
                     .Register(*registry_);
  auto& durations = prometheus::BuildHistogram()
                        .Name("plumb_request_duration_seconds")
                        .Help("Server-side time of a Ranker call, from receipt to response")
                        .Register(*registry_);
  const prometheus::Histogram::BucketBoundaries buckets = {0.0001, 0.0002, 0.0005, 0.001, 0.002,
                                                           0.005,  0.01,   0.02,   0.05,  0.1};
  for (int m = 0; m < kMethods; ++m) {
    durations_[m] = &durations.Add({{"method", kMethodNames[m]}}, buckets);
    // Every Ranker method and reason exists from the start at 0, so that rate() in the
    // overload alert has a series before the first refusal.
    for (const char* reason : kRejectionReasons) {
      rejections_->Add({{"method", kMethodNames[m]}, {"reason", reason}});
    }
  }
  for (auto& c : counters_) c.store(nullptr, std::memory_order_relaxed);
}

prometheus::Counter& ServingMetrics::RequestCounter(RankerMethod method, grpc::StatusCode code) {
  const int c = static_cast<int>(code) >= 0 && static_cast<int>(code) < kCodes
                    ? static_cast<int>(code)
                    : static_cast<int>(grpc::StatusCode::UNKNOWN);
  std::atomic<prometheus::Counter*>& slot = counters_[static_cast<int>(method) * kCodes + c];
  prometheus::Counter* counter = slot.load(std::memory_order_acquire);
  if (counter == nullptr) {
    // Family::Add is idempotent for equal labels, so two threads racing here get the same
    // counter.
    counter = &requests_->Add(
        {{"method", kMethodNames[static_cast<int>(method)]}, {"code", kCodeNames[c]}});
    slot.store(counter, std::memory_order_release);
  }
  return *counter;
}

void ServingMetrics::ObserveRequest(RankerMethod method, grpc::StatusCode code, double seconds) {
  RequestCounter(method, code).Increment();
  durations_[static_cast<int>(method)]->Observe(seconds);
}

void ServingMetrics::ObserveRejection(std::string_view method, Rejection reason) {
  constexpr std::string_view kRankerPrefix = "/plumb.v1.Ranker/";
  std::string_view name = method;
  if (name.starts_with(kRankerPrefix)) name.remove_prefix(kRankerPrefix.size());
  if (name.starts_with("/")) name.remove_prefix(1);
  rejections_
      ->Add(
          {{"method", std::string(name)}, {"reason", kRejectionReasons[static_cast<int>(reason)]}})
      .Increment();
  if (reason != Rejection::kThreadPool) return;
  for (int m = 0; m < kMethods; ++m) {
    if (name == kMethodNames[m]) {
      RequestCounter(static_cast<RankerMethod>(m), grpc::StatusCode::RESOURCE_EXHAUSTED)
          .Increment();
    }
  }
}

std::vector<prometheus::MetricFamily> ServingMetrics::Collect() const {
  std::vector<prometheus::MetricFamily> families = registry_->Collect();
  using prometheus::MetricType;
  if (admission_ != nullptr) {
    families.push_back(Single("plumb_requests_running", "Ranker calls scoring now",
                              MetricType::Gauge, admission_->running()));
    families.push_back(Single("plumb_requests_waiting",
                              "Ranker calls waiting for a free slot (first in, first out)",
                              MetricType::Gauge, admission_->waiting()));
  }
  if (holder_ != nullptr) {
    std::shared_ptr<const Snapshot> snap = holder_->Get();
    double version = 0, age = 0;
    if (snap != nullptr) {
      version = static_cast<double>(snap->version());
      const double now_ms =
          static_cast<double>(std::chrono::duration_cast<std::chrono::milliseconds>(
                                  std::chrono::system_clock::now().time_since_epoch())
                                  .count());
      age = (now_ms - static_cast<double>(snap->created_ms())) / 1000.0;
    }
    families.push_back(Single("plumb_model_version",
                              "Embedding version serving requests (0 before the first load)",
                              MetricType::Gauge, version));
    std::shared_ptr<const WithdrawnItems> withdrawn = holder_->GetWithdrawn();
    families.push_back(Single("plumb_withdrawn_items",
                              "Items withdrawn from serving (never returned; no new version "
                              "needed), as of the last catch-up",
                              MetricType::Gauge,
                              withdrawn ? static_cast<double>(withdrawn->size()) : 0.0));
    if (snap != nullptr) {
      families.push_back(Single("plumb_model_age_seconds",
                                "Seconds since the serving version was created by the trainer",
                                MetricType::Gauge, age));
    }
  }
  if (loop_ != nullptr) {
    families.push_back(Single("plumb_snapshot_swaps_total", "Snapshots built and swapped in",
                              MetricType::Counter, static_cast<double>(loop_->swaps())));
    families.push_back(Single("plumb_snapshot_load_failures_total",
                              "Active versions that failed to load and were skipped",
                              MetricType::Counter, static_cast<double>(loop_->failed_loads())));
    families.push_back(Single("plumb_store_damaged",
                              "1 while the last check of the store's table files found one "
                              "missing or damaged (the server keeps serving what it loaded)",
                              MetricType::Gauge, loop_->store_damaged() ? 1.0 : 0.0));
  }
  if (exposure_ != nullptr) {
    families.push_back(Single("plumb_served_lists_total", "Ranked lists served (all methods)",
                              MetricType::Counter, static_cast<double>(exposure_->lists())));
    families.push_back(Single("plumb_served_slots_total", "Items in the ranked lists served",
                              MetricType::Counter, static_cast<double>(exposure_->slots())));
  }
  return families;
}

}  // namespace plumb::server
