#include "server/status_page.h"

#include <cmath>
#include <cstdio>
#include <limits>

#include "core/metrics.h"
#include "status/history_section.h"
#include "status/html.h"
#include "status/page_json.h"
#include "status/page_shell.h"
#include "status/rates.h"
#include "status/svg_plot.h"

namespace plumb::server {
namespace {

using nlohmann::json;
using status::AppendCard;
using status::AppendTextCard;
using status::Doubles;
using status::ExactNumber;
using status::FormatUtc;
using status::JsonNumber;
using status::JsonNumbers;
using status::NumberAt;

const double kNaN = std::numeric_limits<double>::quiet_NaN();

// The history's series, in this order.
const std::vector<std::string> kSeries = {"lift",        "gini",   "coverage",
                                          "drift_js",    "shift",  "request_rate",
                                          "not_ok_rate", "p50_ms", "p99_ms"};

double SteadySeconds() {
  return std::chrono::duration<double>(std::chrono::steady_clock::now().time_since_epoch()).count();
}

}  // namespace

ServeStatusPage::ServeStatusPage(const SnapshotHolder* holder, const ExposureWindow* window,
                                 const ServingMetrics* metrics, const CatchUpLoop* loop,
                                 const ServeStatusOptions& options)
    : holder_(holder),
      window_(window),
      metrics_(metrics),
      loop_(loop),
      options_(options),
      ring_(kSeries, options.history_points) {}

ServeStatusPage::Totals ServeStatusPage::ReadTotals() const {
  Totals t;
  t.seconds = SteadySeconds();
  if (metrics_ == nullptr) return t;
  for (const prometheus::MetricFamily& f : metrics_->Collect()) {
    if (f.name == "plumb_requests_total") {
      for (const prometheus::ClientMetric& m : f.metric) {
        t.requests += m.counter.value;
        for (const auto& label : m.label) {
          if (label.name == "code" && label.value != "OK") t.not_ok += m.counter.value;
        }
      }
    } else if (f.name == "plumb_request_duration_seconds") {
      for (const prometheus::ClientMetric& m : f.metric) {
        const auto& buckets = m.histogram.bucket;
        if (t.bounds.empty()) {
          for (const auto& b : buckets) {
            if (std::isfinite(b.upper_bound)) t.bounds.push_back(b.upper_bound);
          }
          t.cumulative.assign(t.bounds.size() + 1, 0.0);
        }
        // Same bucket layout for every method (ServingMetrics builds them so).
        for (size_t b = 0; b < buckets.size() && b < t.cumulative.size(); ++b) {
          t.cumulative[b] += static_cast<double>(buckets[b].cumulative_count);
        }
      }
    }
  }
  return t;
}

void ServeStatusPage::Sample(int64_t now_ms) {
  std::vector<double> v(kSeries.size(), kNaN);
  std::shared_ptr<const Snapshot> snap = holder_ ? holder_->Get() : nullptr;
  if (snap != nullptr && window_ != nullptr) {
    const ExposureFigures f = window_->Summarize(*snap);
    if (f.slots > 0) {
      v[0] = f.lift;
      v[1] = f.summary.gini;
      v[2] = f.summary.coverage;
      v[3] = f.summary.drift_js;
      const std::span<const double> target = snap->target_group_shares();
      if (!target.empty() && target.size() == f.summary.exposure_group_shares.size()) {
        v[4] = group_share_shift(f.summary.exposure_group_shares, target).shift;
      }
    }
  }
  std::lock_guard<std::mutex> lock(sample_mu_);
  const Totals now = ReadTotals();
  if (have_previous_) {
    const double dt = now.seconds - previous_.seconds;
    v[5] = status::RatePerSecond(previous_.requests, now.requests, dt);
    v[6] = status::RatePerSecond(previous_.not_ok, now.not_ok, dt);
    if (now.cumulative.size() == previous_.cumulative.size() && !now.bounds.empty()) {
      std::vector<double> delta(now.cumulative.size());
      for (size_t b = 0; b < delta.size(); ++b) {
        delta[b] = now.cumulative[b] - previous_.cumulative[b];
      }
      v[7] = status::HistogramQuantile(0.5, now.bounds, delta) * 1000.0;
      v[8] = status::HistogramQuantile(0.99, now.bounds, delta) * 1000.0;
    }
  }
  previous_ = now;
  have_previous_ = true;
  // v holds one value per series, so the only refusal is a clock step backwards: that point
  // is dropped and the next sample is taken as usual.
  ring_.Add(now_ms, v).IgnoreError();
}

nlohmann::json ServeStatusPage::Json(int64_t now_ms) const {
  json j = status::PageJsonStart("plumb-serve", now_ms, options_.step_ms, options_.history_points);
  std::shared_ptr<const Snapshot> snap = holder_ ? holder_->Get() : nullptr;
  json model = json::object();
  if (snap != nullptr) {
    model["version"] = snap->version();
    model["created_ms"] = snap->created_ms();
    model["swapped_in_ms"] = snap->loaded_ms();
    model["items"] = snap->num_items();
    model["users"] = snap->num_users();
    model["dim"] = snap->dim();
  }
  std::shared_ptr<const CanaryArm> canary = holder_ ? holder_->GetCanary() : nullptr;
  if (canary != nullptr) {
    model["canary_version"] = canary->snapshot->version();
    model["canary_share"] = canary->share_bp / 10000.0;
  }
  if (loop_ != nullptr) {
    model["swaps"] = loop_->swaps();
    model["load_failures"] = loop_->failed_loads();
    model["store_damaged"] = loop_->store_damaged();
  }
  j["model"] = model;
  j["exposure_monitor"] = window_ != nullptr;
  json exposure = json::object();
  json top = json::array();
  if (snap != nullptr && window_ != nullptr) {
    const ExposureFigures f = window_->Summarize(*snap, options_.top_items);
    const ExposureSummary& s = f.summary;
    exposure["window_lists"] = f.lists;
    exposure["window_slots"] = f.slots;
    exposure["groups"] = window_->options().groups;
    exposure["served_popularity"] = JsonNumber(f.served_popularity);
    exposure["interaction_popularity"] = JsonNumber(f.interaction_popularity);
    const bool served = f.slots > 0;
    exposure["lift"] = JsonNumber(served ? f.lift : kNaN);
    exposure["gini"] = JsonNumber(served ? s.gini : kNaN);
    exposure["coverage"] = JsonNumber(served ? s.coverage : kNaN);
    exposure["drift_js"] = JsonNumber(served ? s.drift_js : kNaN);
    exposure["served_group_shares"] = served ? JsonNumbers(s.exposure_group_shares) : json::array();
    exposure["interaction_group_shares"] = JsonNumbers(s.interaction_group_shares);
    const std::span<const double> target = snap->target_group_shares();
    const std::vector<double> target_v(target.begin(), target.end());
    exposure["target_group_shares"] = JsonNumbers(target_v);
    double shift = kNaN;
    if (served && !target.empty() && target.size() == s.exposure_group_shares.size()) {
      shift = group_share_shift(s.exposure_group_shares, target).shift;
    }
    exposure["shift"] = JsonNumber(shift);
    std::vector<uint32_t> group_of_item;
    const bool grouped =
        popularity_groups(snap->item_degrees(), window_->options().groups, &group_of_item).ok() &&
        group_of_item.size() == snap->num_items();
    for (const auto& [item, count] : f.top_items) {
      json row;
      row["id"] = std::string(snap->item_id(item));
      row["served_slots"] = count;
      row["share"] = JsonNumber(static_cast<double>(count) / static_cast<double>(f.slots));
      row["training_degree"] = item < snap->item_degrees().size() ? snap->item_degrees()[item] : 0;
      if (grouped) row["group"] = group_of_item[item] + 1;
      top.push_back(std::move(row));
    }
  }
  j["exposure"] = exposure;
  j["top_items"] = top;
  j["history"] = status::HistoryJson(ring_.Read(options_.plot_points));
  return j;
}

std::string ServeStatusPage::Html(int64_t now_ms) const {
  const json j = Json(now_ms);
  const json& model = j["model"];
  const json& e = j["exposure"];
  std::string s = status::PageStart(
      "plumb-serve status",
      "Ranking endpoint: what it serves and how the served exposure leans. Figures as of " +
          FormatUtc(now_ms) + "; the page reloads every minute.",
      60);

  // ---- the version ------------------------------------------------------------------
  s += "<section><h2>Serving version</h2><div class=\"cards\">";
  if (model.contains("version")) {
    AppendCard(&s, "version", "active version", NumberAt(model, "version"), "", 12);
    AppendTextCard(&s, "swapped_in", "swapped in",
                   FormatUtc(model["swapped_in_ms"].get<int64_t>()));
    AppendTextCard(&s, "created", "created by the trainer",
                   FormatUtc(model["created_ms"].get<int64_t>()));
    AppendCard(&s, "items", "items", NumberAt(model, "items"), "", 12);
    AppendCard(&s, "dim", "dimensions", NumberAt(model, "dim"), "", 6);
  } else {
    AppendTextCard(&s, "version", "active version", "none loaded yet");
  }
  if (model.contains("canary_version")) {
    char text[96];
    std::snprintf(text, sizeof text, "version %llu to %.2f %% of the users",
                  static_cast<unsigned long long>(model["canary_version"].get<uint64_t>()),
                  100.0 * model["canary_share"].get<double>());
    AppendTextCard(&s, "canary", "canary", text);
  }
  if (model.contains("swaps"))
    AppendCard(&s, "swaps", "swaps since start", NumberAt(model, "swaps"), "", 9);
  s += "</div></section>";

  // ---- exposure now -------------------------------------------------------------------
  const size_t groups = e.contains("groups") ? e["groups"].get<size_t>() : 0;
  s += "<section><h2>Served exposure now</h2>";
  if (!j["exposure_monitor"].get<bool>()) {
    s += "<p>The exposure monitor is off (--no-exposure-monitor): no exposure figures.</p>";
  } else if (!e.contains("window_lists")) {
    s += "<p>No version loaded yet.</p>";
  } else {
    s += "<div class=\"cards\">";
    AppendCard(&s, "window_lists", "lists in the window", NumberAt(e, "window_lists"), "", 9);
    AppendCard(&s, "lift", "popularity lift", NumberAt(e, "lift"), "ratio");
    AppendCard(&s, "gini", "exposure Gini", NumberAt(e, "gini"), "0..1");
    AppendCard(&s, "coverage", "catalogue coverage", NumberAt(e, "coverage"), "share");
    AppendCard(&s, "drift_js", "drift (JS divergence)", NumberAt(e, "drift_js"), "bits");
    AppendCard(&s, "shift", "exposure shift vs target", NumberAt(e, "shift"), "of group range");
    s += "</div>";
    status::BarChart bars;
    bars.id = "group-shares";
    bars.title =
        "Share of served slots per popularity group, beside the interactions and the "
        "validation target";
    bars.y_label = "share (0 .. 1)";
    bars.groups = groups;
    bars.series = {{"served slots (window)", Doubles(e["served_group_shares"]), 0},
                   {"training interactions", Doubles(e["interaction_group_shares"]), 1},
                   {"validation target (debiased split)", Doubles(e["target_group_shares"]), 2}};
    bars.note =
        "Groups hold items sorted by training degree with equal interaction mass; "
        "group 1 is the tail. Lift above 1 and a positive shift lean toward the head.";
    if (e["target_group_shares"].empty()) {
      bars.note += " The served version carries no validation target.";
    }
    s += status::RenderBarChart(bars);
  }
  s += "</section>";

  // ---- history --------------------------------------------------------------------------
  status::HistorySection history(&s, j["history"], options_.step_ms, options_.history_points,
                                 options_.plot_points);
  auto series = [&](const char* name) { return history.Series(name); };
  const std::string head = status::GroupColour(groups ? groups - 1 : 4, groups ? groups : 5);
  const std::string tail = status::GroupColour(0, groups ? groups : 5);
  history.Plot("lift", "Popularity lift", "lift (ratio)",
               {{"lift", head, series("lift"), false, "lift"}}, "1 = serving mirrors the data.");
  history.Plot("concentration", "Exposure Gini and catalogue coverage", "ratio (0 .. 1)",
               {{"Gini", "#444444", series("gini"), false, "gini"},
                {"coverage", tail, series("coverage"), true, "coverage"}});
  history.Plot("drift", "Drift and shift", "bits; share of group range",
               {{"drift (JS divergence, bits)", "#7d5ba6", series("drift_js"), false, "drift_js"},
                {"shift vs validation target", head, series("shift"), true, "shift"}},
               "Shift > 0: exposure leans toward the head of the validation target.");
  history.Plot("requests", "Ranker calls", "calls per second",
               {{"all calls", "#4a78b5", series("request_rate"), false, "request_rate"},
                {"calls not OK", "#b23b3b", series("not_ok_rate"), true, "not_ok_rate"}});
  history.Plot("latency", "Server-side latency (all methods)", "milliseconds",
               {{"p50", "#1b7f79", series("p50_ms"), false, "p50_ms"},
                {"p99", "#c2793a", series("p99_ms"), true, "p99_ms"}},
               "Estimated from plumb_request_duration_seconds buckets between two points.");
  history.End();

  // ---- top items -------------------------------------------------------------------------
  s += "<section><h2>Most-served items now</h2>";
  const json& top = j["top_items"];
  if (top.empty()) {
    s += "<p>Nothing served in the window yet.</p>";
  } else {
    s += "<table id=\"top-items\"><thead><tr><th>#</th><th>item id</th><th>served slots</th>"
         "<th>share of slots</th><th>training degree (interactions)</th>"
         "<th>popularity group</th></tr></thead><tbody>";
    int rank = 0;
    for (const json& row : top) {
      s += "<tr><td>" + std::to_string(++rank) + "</td><td><code>";
      status::AppendEscaped(&s, row["id"].get<std::string>(), 60);
      s += "</code></td><td class=\"num\" data-value=\"" +
           ExactNumber(NumberAt(row, "served_slots")) + "\">" +
           std::to_string(row["served_slots"].get<uint64_t>()) +
           "</td><td class=\"num\" data-value=\"" + ExactNumber(NumberAt(row, "share")) + "\">" +
           status::FormatNumber(NumberAt(row, "share"), 3) +
           "</td><td class=\"num\" data-value=\"" + ExactNumber(NumberAt(row, "training_degree")) +
           "\">" + std::to_string(row["training_degree"].get<uint64_t>()) + "</td><td>";
      if (row.contains("group")) {
        const size_t g = row["group"].get<size_t>() - 1;
        s += "<span class=\"swatch\" style=\"background:" + status::GroupColour(g, groups) +
             "\"></span>" + status::GroupName(g, groups);
      }
      s += "</td></tr>";
    }
    s += "</tbody></table>";
  }
  s += "</section>";
  s += status::PageEnd("/status.json");
  return s;
}

}  // namespace plumb::server
