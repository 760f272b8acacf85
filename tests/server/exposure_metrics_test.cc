// The exposure gauges against the served version's validation target: the shift and distance
// gauges equal core's group_share_shift of the served shares against the target shares, and
// they are left out when the version records no target.
#include "server/exposure_metrics.h"

#include <gtest/gtest.h>

#include <map>
#include <string>
#include <vector>

#include "core/metrics.h"
#include "tests/server/test_model.h"

namespace plumb::server {
namespace {

using testing::RandomModel;
using testing::ToParts;

std::map<std::string, double> Gauges(const ExposureMetrics& metrics) {
  std::map<std::string, double> out;
  for (const prometheus::MetricFamily& f : metrics.Collect()) {
    for (const prometheus::ClientMetric& m : f.metric) {
      std::string name = f.name;
      for (const auto& l : m.label) name += "{" + l.name + "=" + l.value + "}";
      out[name] = m.gauge.value;
    }
  }
  return out;
}

TEST(ExposureMetricsTest, ShiftAgainstTheValidationTarget) {
  const testing::TestModel m = RandomModel(20, 50, 4, 3, 1, false);
  SnapshotParts parts = ToParts(m, 1);
  // A tail-heavy target (what a debiased validation split of tail-relevant data looks like).
  parts.target_group_shares = {0.5, 0.25, 0.15, 0.07, 0.03};
  std::shared_ptr<const Snapshot> snap;
  ASSERT_TRUE(Snapshot::Build(std::move(parts), &snap).ok());
  SnapshotHolder holder;
  holder.Swap(snap);
  ExposureWindowOptions o;
  o.window_lists = 1000;
  o.groups = 5;
  ExposureWindow window(o);
  // Serve the most popular items only: clearly toward the head.
  const std::vector<uint32_t> head(snap->items_by_degree().begin(),
                                   snap->items_by_degree().begin() + 5);
  for (int k = 0; k < 50; ++k) window.Record(*snap, head);
  ExposureMetrics metrics(&holder, &window);
  const auto g = Gauges(metrics);
  ASSERT_TRUE(g.count("plumb_exposure_shift_ratio"));
  std::vector<double> served;
  for (int gr = 1; gr <= 5; ++gr) {
    served.push_back(g.at("plumb_exposure_group_share_ratio{group=" + std::to_string(gr) + "}"));
    EXPECT_DOUBLE_EQ(
        g.at("plumb_validation_target_group_share_ratio{group=" + std::to_string(gr) + "}"),
        snap->target_group_shares()[gr - 1]);
  }
  const GroupShift want = group_share_shift(served, snap->target_group_shares());
  EXPECT_DOUBLE_EQ(g.at("plumb_exposure_shift_ratio"), want.shift);
  EXPECT_DOUBLE_EQ(g.at("plumb_exposure_shift_distance_ratio"), want.distance);
  EXPECT_GT(want.shift, 0.2) << "serving only the head is under-corrected against this target";
}

TEST(ExposureMetricsTest, NoTargetNoShiftGauges) {
  const testing::TestModel m = RandomModel(20, 50, 4, 3, 1, false);
  std::shared_ptr<const Snapshot> snap = testing::BuildSnapshot(m, 1);
  SnapshotHolder holder;
  holder.Swap(snap);
  ExposureWindow window(ExposureWindowOptions{});
  const std::vector<uint32_t> list = {0, 1, 2};
  window.Record(*snap, list);
  const auto g = Gauges(ExposureMetrics(&holder, &window));
  EXPECT_TRUE(g.count("plumb_exposure_gini_ratio"));
  EXPECT_FALSE(g.count("plumb_exposure_shift_ratio"));
  EXPECT_FALSE(g.count("plumb_validation_target_group_share_ratio{group=1}"));
}

}  // namespace
}  // namespace plumb::server
