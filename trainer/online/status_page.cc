#include "trainer/online/status_page.h"

#include <algorithm>
#include <chrono>
#include <cmath>
#include <limits>

#include "status/history_section.h"
#include "status/html.h"
#include "status/page_json.h"
#include "status/page_shell.h"
#include "status/rates.h"
#include "status/svg_plot.h"
#include "trainer/online/event_validation.h"
#include "trainer/online/training_config.h"

namespace plumb::online {
namespace {

using nlohmann::json;
using status::AppendCard;
using status::AppendEscaped;
using status::ExactNumber;
using status::FormatNumber;
using status::FormatUtc;
using status::JsonNumber;
using status::NumberAt;

const double kNaN = std::numeric_limits<double>::quiet_NaN();

std::vector<std::string> SeriesNames() {
  std::vector<std::string> names = {"log_sequence", "trained_sequence", "lag_events",
                                    "lag_seconds",  "accepted_rate",    "duplicate_rate",
                                    "loss",         "samples_rate"};
  for (int r = 0; r < kNumRejectReasons; ++r) {
    names.push_back("rejected_rate_" +
                    std::string(RejectReasonLabel(static_cast<RejectReason>(r))));
  }
  return names;
}

// The version timeline: one mark per version at its creation time, by gate outcome
// (filled circle passed, hollow circle skipped, cross failed), the active one ringed, and
// under it each version's validation shares per popularity group as a stacked column in the
// groups' colours.
std::string Timeline(const json& versions, size_t groups) {
  constexpr double W = 640, H = 200, L = 72, R = 16, T = 16, B = 46;
  std::string s =
      "<figure class=\"plot wide\" id=\"versions-timeline\"><figcaption>Versions over "
      "time</figcaption><svg xmlns=\"http://www.w3.org/2000/svg\" role=\"img\" "
      "viewBox=\"0 0 640 200\" data-plot=\"versions\" aria-label=\"versions over "
      "time\">";
  char buf[512];
  int64_t t0 = 0, t1 = 0;
  for (const json& v : versions) {
    const int64_t t = v["created_ms"].get<int64_t>();
    t0 = t0 == 0 ? t : std::min(t0, t);
    t1 = std::max(t1, t);
  }
  // Marks sit 24 px inside the axis ends, clear of the row labels.
  auto x_of = [&](int64_t t) {
    const double left = L + 24, width = W - R - 24 - left;
    return t1 == t0 ? left + width / 2
                    : left + width * static_cast<double>(t - t0) / static_cast<double>(t1 - t0);
  };
  const double lane = T + 26;                              // marks
  const double bar_top = T + 50, bar_h = H - B - bar_top;  // stacked validation shares
  std::snprintf(buf, sizeof buf,
                "<line class=\"axis\" x1=\"%.1f\" x2=\"%.1f\" y1=\"%.1f\" y2=\"%.1f\"/>"
                "<text class=\"tick\" x=\"%.1f\" y=\"%.1f\" text-anchor=\"end\">gate</text>"
                "<text class=\"tick\" x=\"%.1f\" y=\"%.1f\" text-anchor=\"end\">validation</text>"
                "<text class=\"tick\" x=\"%.1f\" y=\"%.1f\" text-anchor=\"end\">shares</text>",
                L, W - R, H - B, H - B, L - 6, lane + 4, L - 6, bar_top + bar_h / 2, L - 6,
                bar_top + bar_h / 2 + 13);
  s += buf;
  for (const json& v : versions) {
    const double x = x_of(v["created_ms"].get<int64_t>());
    const std::string gate = v["gate"].get<std::string>();
    const std::string version = std::to_string(v["version"].get<uint64_t>());
    const bool active = v["active"].get<bool>();
    s += "<g class=\"version\" data-version=\"" + version + "\" data-gate=\"" + gate +
         "\" data-active=\"" + (active ? "1" : "0") + "\"><title>version " + version + ", gate " +
         gate + (active ? ", active" : "") + "</title>";
    if (gate == "failed") {
      std::snprintf(buf, sizeof buf,
                    "<path d=\"M%.1f %.1fl10 10m0 -10l-10 10\" stroke=\"#b23b3b\" "
                    "stroke-width=\"2\"/>",
                    x - 5, lane - 5);
    } else {
      std::snprintf(buf, sizeof buf,
                    "<circle cx=\"%.1f\" cy=\"%.1f\" r=\"5\" fill=\"%s\" stroke=\"#333\"/>", x,
                    lane, gate == "passed" ? "#333333" : "#ffffff");
    }
    s += buf;
    if (active) {
      std::snprintf(buf, sizeof buf,
                    "<circle cx=\"%.1f\" cy=\"%.1f\" r=\"9\" fill=\"none\" stroke=\"#1b7f79\" "
                    "stroke-width=\"2\"/><text class=\"tick\" x=\"%.1f\" y=\"%.1f\" "
                    "text-anchor=\"middle\">active</text>",
                    x, lane, x, lane - 13);
      s += buf;
    }
    std::snprintf(buf, sizeof buf,
                  "<text class=\"tick\" x=\"%.1f\" y=\"%.1f\" text-anchor=\"middle\">v%s</text>", x,
                  H - B + 16, version.c_str());
    s += buf;
    const std::vector<double> shares = status::Doubles(v["validation_group_shares"]);
    if (shares.size() == groups) {
      double y = bar_top + bar_h;
      for (size_t g = 0; g < groups; ++g) {
        if (!std::isfinite(shares[g]) || shares[g] <= 0) continue;
        const double h = bar_h * shares[g];
        y -= h;
        std::snprintf(buf, sizeof buf,
                      "<rect class=\"share\" x=\"%.1f\" y=\"%.1f\" width=\"8\" height=\"%.1f\" "
                      "fill=\"%s\" data-group=\"%zu\" data-value=\"%s\"/>",
                      x - 4, y, h, status::GroupColour(g, groups).c_str(), g,
                      ExactNumber(shares[g]).c_str());
        s += buf;
      }
    }
    s += "</g>";
  }
  std::snprintf(buf, sizeof buf,
                "<text class=\"axis-label\" x=\"%.1f\" y=\"%.1f\" text-anchor=\"middle\">"
                "version, placed at its creation time (UTC, %s .. %s)</text>",
                L + (W - L - R) / 2, H - 6, t0 ? FormatUtc(t0).c_str() : "",
                t1 ? FormatUtc(t1).c_str() : "");
  s += buf;
  if (versions.empty()) {
    s += "<text class=\"empty\" x=\"356\" y=\"90\" text-anchor=\"middle\">no versions yet</text>";
  }
  s += "</svg><ul class=\"legend\"><li><span class=\"swatch\" style=\"background:#333;"
       "border-radius:6px\"></span>gate passed</li><li><span class=\"swatch\" style=\""
       "background:#fff;border:1px solid #333;border-radius:6px\"></span>gate skipped (nothing "
       "to compare with)</li><li><span class=\"swatch\" style=\"background:#b23b3b;height:3px\">"
       "</span>gate failed (a cross)</li><li><span class=\"swatch\" style=\"background:#fff;"
       "border:2px solid #1b7f79;border-radius:6px\"></span>active</li>";
  for (size_t g = 0; g < groups; ++g) {
    s += "<li><span class=\"swatch\" style=\"background:" + status::GroupColour(g, groups) +
         "\"></span>" + status::GroupName(g, groups) + "</li>";
  }
  s += "</ul><p class=\"note\">Columns: each version's debiased validation split, share of "
       "held-out interactions per popularity group (tail at the bottom).</p></figure>";
  return s;
}

}  // namespace

TrainStatusPage::TrainStatusPage(const store::Store* store, const OnlineLoop* loop,
                                 const TrainMetrics* metrics, const TrainStatusOptions& options)
    : store_(store),
      loop_(loop),
      metrics_(metrics),
      options_(options),
      ring_(SeriesNames(), options.history_points) {}

TrainStatusPage::Totals TrainStatusPage::ReadTotals(const OnlineStatus& status) const {
  Totals t;
  t.seconds =
      std::chrono::duration<double>(std::chrono::steady_clock::now().time_since_epoch()).count();
  t.samples = static_cast<double>(status.samples_trained);
  if (metrics_ != nullptr) {
    t.accepted = metrics_->accepted();
    t.duplicates = metrics_->duplicates();
    for (int r = 0; r < kNumRejectReasons; ++r) {
      t.rejected.push_back(metrics_->rejected(static_cast<RejectReason>(r)));
    }
  }
  return t;
}

void TrainStatusPage::Sample(int64_t now_ms) {
  const OnlineStatus st = loop_ ? loop_->status() : OnlineStatus{};
  std::vector<double> v(ring_.num_series(), kNaN);
  v[0] = static_cast<double>(st.last_sequence);
  v[1] = static_cast<double>(st.trained_sequence);
  v[2] = static_cast<double>(st.last_sequence - std::min(st.last_sequence, st.trained_sequence));
  v[3] = st.oldest_untrained_received_ms > 0
             ? std::max(0.0, static_cast<double>(now_ms - st.oldest_untrained_received_ms) / 1000.0)
             : 0.0;
  v[6] = st.samples_trained > 0 ? st.last_loss : kNaN;
  std::lock_guard<std::mutex> lock(sample_mu_);
  const Totals now = ReadTotals(st);
  if (have_previous_) {
    const double dt = now.seconds - previous_.seconds;
    v[4] = status::RatePerSecond(previous_.accepted, now.accepted, dt);
    v[5] = status::RatePerSecond(previous_.duplicates, now.duplicates, dt);
    v[7] = status::RatePerSecond(previous_.samples, now.samples, dt);
    for (size_t r = 0; r < now.rejected.size() && r < previous_.rejected.size(); ++r) {
      v[8 + r] = status::RatePerSecond(previous_.rejected[r], now.rejected[r], dt);
    }
  }
  previous_ = now;
  have_previous_ = true;
  // v holds one value per series, so the only refusal is a clock step backwards: that point
  // is dropped and the next sample is taken as usual.
  ring_.Add(now_ms, v).IgnoreError();
}

nlohmann::json TrainStatusPage::Json(int64_t now_ms) const {
  json j = status::PageJsonStart("plumb-train", now_ms, options_.step_ms, options_.history_points);
  j["trainer_address"] = options_.trainer_address;
  const OnlineStatus st = loop_ ? loop_->status() : OnlineStatus{};
  json t;
  t["active_version"] = st.active_version;
  t["log_sequence"] = st.last_sequence;
  t["trained_sequence"] = st.trained_sequence;
  t["lag_events"] = st.last_sequence - std::min(st.last_sequence, st.trained_sequence);
  t["objective"] = st.objective;
  t["users"] = st.num_users;
  t["items"] = st.num_items;
  t["samples_trained"] = st.samples_trained;
  t["loss"] = JsonNumber(st.samples_trained > 0 ? st.last_loss : kNaN);
  t["auto_activate"] = st.auto_activate;
  t["auto_activate_reason"] = st.auto_activate_reason;
  t["refit_running"] = st.refit_running;
  t["pending_config_change"] = st.pending_config_change;
  t["training_config"] = FormatTrainingConfig(st.training);
  if (metrics_ != nullptr) {
    t["events_accepted"] = metrics_->accepted();
    t["events_duplicate"] = metrics_->duplicates();
    json rejected = json::object();
    for (int r = 0; r < kNumRejectReasons; ++r) {
      const auto reason = static_cast<RejectReason>(r);
      rejected[std::string(RejectReasonLabel(reason))] = metrics_->rejected(reason);
    }
    t["events_rejected"] = rejected;
  }
  j["trainer"] = t;
  json versions = json::array();
  std::vector<store::VersionManifest> manifests;
  if (store_ != nullptr && store_->ListVersions(&manifests).ok()) {
    for (const store::VersionManifest& m : manifests) {
      json v;
      v["version"] = m.version;
      v["created_ms"] = m.created_ms;
      v["gate"] = std::string(store::GateOutcomeName(m.gate, "unrecorded"));
      v["gate_reason"] = m.gate_reason;
      v["validation_recall"] = JsonNumber(m.validation_recall);
      v["validation_k"] = m.validation_k;
      v["validation_shift"] = JsonNumber(m.validation_shift);
      v["validation_group_shares"] = status::JsonNumbers(m.validation_group_shares);
      v["events_seen"] = m.events_seen;
      v["training_config"] = FormatTrainingConfig(m.training);
      v["active"] = m.version == st.active_version;
      v["pinned"] = m.pinned;
      versions.push_back(std::move(v));
    }
  }
  j["versions"] = versions;  // newest first
  j["history"] = status::HistoryJson(ring_.Read(options_.plot_points));
  return j;
}

std::string TrainStatusPage::Html(int64_t now_ms) const {
  const json j = Json(now_ms);
  const json& t = j["trainer"];
  std::string s = status::PageStart(
      "plumb-train status",
      "Sidecar trainer: the event log, training and the versions it published. Figures as of " +
          FormatUtc(now_ms) + "; the page reloads every minute.",
      60);
  s += "<section><h2>Now</h2><div class=\"cards\">";
  AppendCard(&s, "active_version", "active version", NumberAt(t, "active_version"), "", 12);
  AppendCard(&s, "log_sequence", "log sequence", NumberAt(t, "log_sequence"), "", 12);
  AppendCard(&s, "trained_sequence", "trained sequence", NumberAt(t, "trained_sequence"), "", 12);
  AppendCard(&s, "lag_events", "lag", NumberAt(t, "lag_events"), "events", 12);
  AppendCard(&s, "events_accepted", "events accepted since start", NumberAt(t, "events_accepted"),
             "", 12);
  AppendCard(&s, "loss", "training loss (last batch)", NumberAt(t, "loss"), "nats", 4);
  s += "<div class=\"card\" data-key=\"auto_activate\"><div class=\"label\">automatic "
       "activation</div><div class=\"value\">";
  s += t["auto_activate"].get<bool>() ? "on" : "off";
  s += "</div></div></div><p class=\"note\">Training with ";
  AppendEscaped(&s, t["training_config"].get<std::string>());
  if (!t["auto_activate_reason"].get<std::string>().empty()) {
    s += ". Automatic activation is off: ";
    AppendEscaped(&s, t["auto_activate_reason"].get<std::string>());
  }
  if (!t["pending_config_change"].get<std::string>().empty()) {
    s += ". Waiting for a rebuild: ";
    AppendEscaped(&s, t["pending_config_change"].get<std::string>());
  }
  s += ".</p></section>";

  status::HistorySection history(&s, j["history"], options_.step_ms, options_.history_points,
                                 options_.plot_points);
  auto series = [&](const std::string& name) { return history.Series(name); };
  history.Plot(
      "sequences", "Event log and training", "log sequence number (events)",
      {{"log sequence (acknowledged)", "#4a78b5", series("log_sequence"), false, "log_sequence"},
       {"trained sequence", "#1b7f79", series("trained_sequence"), true, "trained_sequence"}},
      "The gap between the lines is the lag.");
  history.Plot("lag", "Lag", "events behind the log",
               {{"lag", "#c2793a", series("lag_events"), false, "lag_events"}});
  std::vector<status::LineSeries> events = {
      {"accepted", "#1b7f79", series("accepted_rate"), false, "accepted_rate"},
      {"duplicate (acknowledged, not stored again)", "#4a78b5", series("duplicate_rate"), true,
       "duplicate_rate"}};
  static constexpr const char* kRejectColours[] = {"#b23b3b", "#7d5ba6", "#c2793a", "#52606d",
                                                   "#9c6b2f", "#5f8f3a", "#d0648a", "#2f4f8f"};
  for (int r = 0; r < kNumRejectReasons; ++r) {
    const std::string label(RejectReasonLabel(static_cast<RejectReason>(r)));
    std::vector<double> values = series("rejected_rate_" + label);
    // Only the reasons that occurred in the history get a line (the table in /status.json
    // and the counters have them all).
    if (std::none_of(values.begin(), values.end(), [](double x) { return x > 0; })) continue;
    events.push_back({"rejected: " + label, kRejectColours[r], std::move(values), true,
                      "rejected_rate_" + label});
  }
  history.Plot("events", "Events", "events per second", std::move(events),
               "Rejection reasons get a line once an event was rejected for them.");
  history.Plot("loss", "Training loss", "loss per sample (nats)",
               {{"loss", "#444444", series("loss"), false, "loss"}});
  history.Plot("samples", "Training throughput", "samples per second",
               {{"samples", "#7d5ba6", series("samples_rate"), false, "samples_rate"}});
  history.End();

  // ---- versions -----------------------------------------------------------------------------
  const json& versions = j["versions"];
  s += "<section><h2>Versions</h2>";
  size_t groups = options_.groups;
  for (const json& v : versions) {
    if (!v["validation_group_shares"].empty()) {
      groups = v["validation_group_shares"].size();
      break;
    }
  }
  s += Timeline(versions, groups);
  s += "<table id=\"versions\"><thead><tr><th>version</th><th>created (UTC)</th><th>gate</th>"
       "<th>validation recall</th><th>shift vs target</th><th>events seen</th>"
       "<th>training configuration</th><th></th></tr></thead><tbody>";
  uint64_t active = 0, rollback = 0, promote = 0;
  for (const json& v : versions) {
    const uint64_t version = v["version"].get<uint64_t>();
    const bool is_active = v["active"].get<bool>();
    if (is_active) active = version;
    s += std::string("<tr") + (is_active ? " class=\"active\"" : "") + " data-version=\"" +
         std::to_string(version) + "\"><td>" + std::to_string(version) + "</td><td>" +
         FormatUtc(v["created_ms"].get<int64_t>()) + "</td><td>" + v["gate"].get<std::string>();
    if (!v["gate_reason"].get<std::string>().empty()) {
      s += ": ";
      AppendEscaped(&s, v["gate_reason"].get<std::string>(), 160);
    }
    s += "</td><td class=\"num\" data-value=\"" + ExactNumber(NumberAt(v, "validation_recall")) +
         "\">" + FormatNumber(NumberAt(v, "validation_recall"), 4);
    if (v["validation_k"].get<uint32_t>() > 0) {
      s += " @" + std::to_string(v["validation_k"].get<uint32_t>());
    }
    s += "</td><td class=\"num\" data-value=\"" + ExactNumber(NumberAt(v, "validation_shift")) +
         "\">" + FormatNumber(NumberAt(v, "validation_shift"), 3) + "</td><td class=\"num\">" +
         std::to_string(v["events_seen"].get<uint64_t>()) + "</td><td><code>";
    AppendEscaped(&s, v["training_config"].get<std::string>());
    s += "</code></td><td>";
    if (is_active) s += "<strong>active</strong>";
    if (v["pinned"].get<bool>()) s += " pinned";
    s += "</td></tr>";
  }
  s += "</tbody></table>";
  // Rollback: the newest version older than the active one; promotion: the newest passing
  // version newer than the active one.
  for (const json& v : versions) {
    const uint64_t version = v["version"].get<uint64_t>();
    if (version < active && rollback == 0) rollback = version;
    if (version > active && promote == 0 && v["gate"].get<std::string>() == "passed") {
      promote = version;
    }
  }
  const std::string address = options_.trainer_address;
  s += "<h2>Promote or roll back</h2><p class=\"note\">This page changes nothing. Run these "
       "where plumb-query can reach the trainer (add --token-file and --tls-ca if it needs "
       "them). Activating by hand turns automatic activation off until it is turned on "
       "again.</p><pre id=\"commands\">";
  auto command = [&](const std::string& comment, const std::string& args) {
    s += "# ";
    AppendEscaped(&s, comment);
    s += "\nplumb-query ";
    AppendEscaped(&s, args + " --trainer " + address);
    s += "\n";
  };
  command("list the kept versions", "versions");
  if (rollback != 0) {
    command("roll back to version " + std::to_string(rollback),
            "activate --model-version " + std::to_string(rollback));
  }
  if (promote != 0) {
    command("promote version " + std::to_string(promote),
            "activate --model-version " + std::to_string(promote));
  }
  command("let gate-passing versions activate themselves again", "auto-activate on");
  s += "</pre></section>";
  s += status::PageEnd("/status.json");
  return s;
}

}  // namespace plumb::online
