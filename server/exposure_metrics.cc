#include "server/exposure_metrics.h"

#include <string>

#include "core/metrics.h"

namespace plumb::server {
prometheus::MetricFamily GaugeFamily(const std::string& name, const std::string& help) {
  prometheus::MetricFamily f;
  f.name = name;
  f.help = help;
  f.type = prometheus::MetricType::Gauge;
  return f;
}

void AddGauge(prometheus::MetricFamily* family, double value,
              std::vector<prometheus::ClientMetric::Label> labels) {
  prometheus::ClientMetric m;
  m.gauge.value = value;
  m.label = std::move(labels);
  family->metric.push_back(std::move(m));
}

std::vector<prometheus::MetricFamily> ExposureFamilies(
    const ExposureFigures& fig, const Snapshot& snap, const std::string& prefix,
    const std::vector<prometheus::ClientMetric::Label>& labels, bool with_interaction) {
  std::vector<prometheus::MetricFamily> out;
  const ExposureSummary& s = fig.summary;
  auto with = [&](std::vector<prometheus::ClientMetric::Label> more) {
    more.insert(more.begin(), labels.begin(), labels.end());
    return more;
  };
  auto single = [&](const std::string& name, const std::string& help, double v) {
    prometheus::MetricFamily f = GaugeFamily(name, help);
    AddGauge(&f, v, labels);
    out.push_back(std::move(f));
  };
  single(prefix + "window_lists", "Served lists in the exposure window",
         static_cast<double>(fig.lists));
  single(prefix + "served_popularity_interactions",
         "ARP: mean training degree (interactions per item) of the served slots in the window",
         fig.served_popularity);
  if (with_interaction) {
    single("plumb_interaction_popularity_interactions",
           "Mean training degree (interactions per item) over training interactions, "
           "sum d^2 / sum d: the ARP of serving that mirrors the data",
           fig.interaction_popularity);
  }
  single(prefix + "popularity_lift_ratio",
         "Served popularity / interaction popularity (1 neutral, above 1 favours the head)",
         fig.lift);
  single(prefix + "gini_ratio", "Gini coefficient of item exposure in the window", s.gini);
  single(prefix + "coverage_ratio", "Share of the catalogue served at least once in the window",
         s.coverage);
  prometheus::MetricFamily exp = GaugeFamily(
      prefix + "group_share_ratio",
      "Share of served slots per popularity group (group 1 = least popular, as in plumb eval)");
  for (size_t g = 0; g < s.exposure_group_shares.size(); ++g) {
    AddGauge(&exp, s.exposure_group_shares[g], with({{"group", std::to_string(g + 1)}}));
  }
  out.push_back(std::move(exp));
  if (with_interaction) {
    prometheus::MetricFamily inter =
        GaugeFamily("plumb_interaction_group_share_ratio",
                    "Share of training interactions per popularity group "
                    "(group 1 = least popular)");
    for (size_t g = 0; g < s.interaction_group_shares.size(); ++g) {
      AddGauge(&inter, s.interaction_group_shares[g], {{"group", std::to_string(g + 1)}});
    }
    out.push_back(std::move(inter));
  }
  if (!s.exposure_group_shares.empty()) {
    single(prefix + "head_share_ratio", "Share of served slots in the most popular group",
           s.exposure_group_shares.back());
  }
  if (with_interaction && !s.interaction_group_shares.empty()) {
    single("plumb_interaction_head_share_ratio",
           "Share of training interactions in the most popular group",
           s.interaction_group_shares.back());
  }
  // Over/under-correction against the served version's validation target (its debiased
  // validation split's shares), when the trainer recorded one with as many groups.
  const std::span<const double> target = snap.target_group_shares();
  if (!target.empty() && target.size() == s.exposure_group_shares.size() && fig.slots > 0) {
    if (with_interaction) {
      prometheus::MetricFamily t = GaugeFamily(
          "plumb_validation_target_group_share_ratio",
          "The served version's debiased validation split: share of held-out interactions per "
          "popularity group (group 1 = least popular), the target of served exposure");
      for (size_t g = 0; g < target.size(); ++g) {
        AddGauge(&t, target[g], {{"group", std::to_string(g + 1)}});
      }
      out.push_back(std::move(t));
    }
    const GroupShift shift = group_share_shift(s.exposure_group_shares, target);
    single(prefix + "shift_ratio",
           "Popularity shift of served exposure against the validation target, share of the "
           "group range: > 0 toward the head (under-corrected), < 0 toward the tail "
           "(over-corrected)",
           shift.shift);
    single(prefix + "shift_distance_ratio",
           "Earth mover's distance between served and target group shares over the ordered "
           "groups, share of the group range (0 .. 1)",
           shift.distance);
  }
  single(prefix + "js_divergence",
         "Jensen-Shannon divergence in bits (0 identical .. 1 disjoint) between the exposure and "
         "the interaction group shares",
         s.drift_js);
  return out;
}

std::vector<prometheus::MetricFamily> ExposureMetrics::Collect() const {
  std::shared_ptr<const Snapshot> snap = holder_ ? holder_->Get() : nullptr;
  if (snap == nullptr || window_ == nullptr) return {};
  return ExposureFamilies(window_->Summarize(*snap), *snap, "plumb_exposure_", {}, true);
}

}  // namespace plumb::server
