// CanaryExposure: exposure of each arm of a canary rollout, so that an operator can compare the
// candidate with the active version before promoting (README "Canary rollouts").
//
// While a canary runs (SnapshotHolder::GetCanary), every served list is also counted into one of
// two exposure windows (ExposureWindow, the same options as the main monitor): the candidate
// arm's when the list was scored by the candidate's version, the active arm's otherwise. A new
// candidate version starts both windows afresh. At scrape time both arms are summarised against
// the *active* snapshot (the same training degrees and popularity groups), so their figures
// compare directly, and exported as plumb_canary_exposure_*{arm="active"|"candidate"}, with the
// canary's setting (plumb_canary_version{arm}, plumb_canary_share_ratio). Without a canary only
// plumb_canary_share_ratio (0) is exported.
//
// Thread-safe: Record from any number of request threads (one atomic load, then the window's
// own cost), Collect from the metrics endpoint's threads.
#pragma once

#include <prometheus/collectable.h>
#include <prometheus/metric_family.h>

#include <atomic>
#include <memory>
#include <mutex>
#include <vector>

#include "server/exposure_sink.h"
#include "server/exposure_window.h"
#include "server/snapshot_holder.h"

namespace plumb::server {

class CanaryExposure final : public ExposureSink, public prometheus::Collectable {
 public:
  // `holder` is borrowed and must outlive this object.
  CanaryExposure(const SnapshotHolder* holder, const ExposureWindowOptions& options);

  void Record(const Snapshot& snap, std::span<const uint32_t> items) override;
  std::vector<prometheus::MetricFamily> Collect() const override;

  // Lists counted per arm for the running canary (0, 0 without one). For tests and pages.
  struct Counts {
    uint64_t candidate_version = 0;
    uint64_t active_lists = 0;
    uint64_t candidate_lists = 0;
  };
  Counts counts() const;

 private:
  struct Arms {
    explicit Arms(uint64_t version, const ExposureWindowOptions& options)
        : candidate_version(version), active(options), candidate(options) {}
    const uint64_t candidate_version;
    ExposureWindow active;
    ExposureWindow candidate;
    std::atomic<uint64_t> active_lists{0};
    std::atomic<uint64_t> candidate_lists{0};
  };
  // The windows of canary `version`, made afresh when the canary changed.
  std::shared_ptr<Arms> ArmsFor(uint64_t version);

  const SnapshotHolder* const holder_;
  const ExposureWindowOptions options_;
  std::mutex mu_;  // serialises making new arms
  std::atomic<std::shared_ptr<Arms>> arms_;
};

}  // namespace plumb::server
