// ExposureMetrics: the exposure monitor's gauges in Prometheus exposition, computed from an
// ExposureWindow against the version being served at scrape time. Names as in
// docs/operators.md: plumb_exposure_* and plumb_interaction_*.
#pragma once

#include <prometheus/collectable.h>
#include <prometheus/metric_family.h>

#include <string>
#include <vector>

#include "server/exposure_window.h"
#include "server/snapshot_holder.h"

namespace plumb::server {

// A gauge family named `name`, and one metric of it with `labels`: the pieces every
// hand-built collector of plumb-serve's exposure gauges uses.
prometheus::MetricFamily GaugeFamily(const std::string& name, const std::string& help);
void AddGauge(prometheus::MetricFamily* family, double value,
              std::vector<prometheus::ClientMetric::Label> labels = {});

// The exposure gauges of `fig` (summarised against `snap`), named `prefix` + the part after
// "plumb_exposure_" of the names in docs/operators.md, each metric carrying `labels`; the
// interaction and validation-target gauges (the same for every arm) only with
// with_interaction.
std::vector<prometheus::MetricFamily> ExposureFamilies(
    const ExposureFigures& fig, const Snapshot& snap, const std::string& prefix,
    const std::vector<prometheus::ClientMetric::Label>& labels, bool with_interaction);

class ExposureMetrics final : public prometheus::Collectable {
 public:
  // Both borrowed; must outlive every Collect() call.
  ExposureMetrics(const SnapshotHolder* holder, const ExposureWindow* window)
      : holder_(holder), window_(window) {}

  // Thread-safe (called by the metrics endpoint's HTTP threads). Omits the gauges before the first
  // snapshot is loaded.
  std::vector<prometheus::MetricFamily> Collect() const override;

 private:
  const SnapshotHolder* holder_;
  const ExposureWindow* window_;
};

}  // namespace plumb::server
