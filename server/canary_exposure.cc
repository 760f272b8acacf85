#include "server/canary_exposure.h"

#include <string>

#include "server/exposure_metrics.h"

namespace plumb::server {

namespace {

// Appends `more` to `out`, merging families of the same name.
void Merge(std::vector<prometheus::MetricFamily> more, std::vector<prometheus::MetricFamily>* out) {
  for (prometheus::MetricFamily& f : more) {
    bool merged = false;
    for (prometheus::MetricFamily& have : *out) {
      if (have.name == f.name) {
        for (prometheus::ClientMetric& m : f.metric) have.metric.push_back(std::move(m));
        merged = true;
        break;
      }
    }
    if (!merged) out->push_back(std::move(f));
  }
}

}  // namespace

CanaryExposure::CanaryExposure(const SnapshotHolder* holder, const ExposureWindowOptions& options)
    : holder_(holder), options_(options) {}

std::shared_ptr<CanaryExposure::Arms> CanaryExposure::ArmsFor(uint64_t version) {
  std::shared_ptr<Arms> arms = arms_.load(std::memory_order_acquire);
  if (arms != nullptr && arms->candidate_version == version) return arms;
  std::lock_guard<std::mutex> lock(mu_);
  arms = arms_.load(std::memory_order_acquire);
  if (arms != nullptr && arms->candidate_version == version) return arms;
  arms = std::make_shared<Arms>(version, options_);
  arms_.store(arms, std::memory_order_release);
  return arms;
}

void CanaryExposure::Record(const Snapshot& snap, std::span<const uint32_t> items) {
  std::shared_ptr<const CanaryArm> canary = holder_->GetCanary();
  if (canary == nullptr) return;
  const uint64_t candidate = canary->snapshot->version();
  std::shared_ptr<Arms> arms = ArmsFor(candidate);
  if (snap.version() == candidate) {
    arms->candidate.Record(snap, items);
    arms->candidate_lists.fetch_add(1, std::memory_order_relaxed);
  } else {
    arms->active.Record(snap, items);
    arms->active_lists.fetch_add(1, std::memory_order_relaxed);
  }
}

CanaryExposure::Counts CanaryExposure::counts() const {
  Counts c;
  std::shared_ptr<const CanaryArm> canary = holder_->GetCanary();
  std::shared_ptr<Arms> arms = arms_.load(std::memory_order_acquire);
  if (canary == nullptr || arms == nullptr ||
      arms->candidate_version != canary->snapshot->version()) {
    return c;
  }
  c.candidate_version = arms->candidate_version;
  c.active_lists = arms->active_lists.load(std::memory_order_relaxed);
  c.candidate_lists = arms->candidate_lists.load(std::memory_order_relaxed);
  return c;
}

std::vector<prometheus::MetricFamily> CanaryExposure::Collect() const {
  std::vector<prometheus::MetricFamily> out;
  std::shared_ptr<const CanaryArm> canary = holder_->GetCanary();
  std::shared_ptr<const Snapshot> active = holder_->Get();
  prometheus::MetricFamily share =
      GaugeFamily("plumb_canary_share_ratio",
                  "Share of the subjects (users; items for SimilarItems) served the canary's "
                  "candidate version (0: no canary)");
  AddGauge(&share, canary != nullptr && active != nullptr ? canary->share_bp / 10000.0 : 0.0);
  out.push_back(std::move(share));
  if (canary == nullptr || active == nullptr) return out;
  prometheus::MetricFamily versions =
      GaugeFamily("plumb_canary_version", "The version each arm of the canary serves");
  AddGauge(&versions, static_cast<double>(active->version()), {{"arm", "active"}});
  AddGauge(&versions, static_cast<double>(canary->snapshot->version()), {{"arm", "candidate"}});
  out.push_back(std::move(versions));
  std::shared_ptr<Arms> arms = arms_.load(std::memory_order_acquire);
  if (arms == nullptr || arms->candidate_version != canary->snapshot->version()) return out;
  prometheus::MetricFamily lists = GaugeFamily(
      "plumb_canary_served_lists", "Lists served by each arm since this canary's candidate began");
  AddGauge(&lists, static_cast<double>(arms->active_lists.load()), {{"arm", "active"}});
  AddGauge(&lists, static_cast<double>(arms->candidate_lists.load()), {{"arm", "candidate"}});
  out.push_back(std::move(lists));
  // Both arms against the active version's degrees and groups, so that they compare directly.
  Merge(ExposureFamilies(arms->active.Summarize(*active), *active, "plumb_canary_exposure_",
                         {{"arm", "active"}}, false),
        &out);
  Merge(ExposureFamilies(arms->candidate.Summarize(*active), *active, "plumb_canary_exposure_",
                         {{"arm", "candidate"}}, false),
        &out);
  return out;
}

}  // namespace plumb::server
