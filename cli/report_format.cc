#include "cli/report_format.h"

#include <cmath>
#include <cstdio>

namespace plumb::cli {
namespace {

std::string Fixed(double v, int precision) {
  if (std::isnan(v)) return "n/a";
  char buf[64];
  std::snprintf(buf, sizeof buf, "%.*f", precision, v);
  return buf;
}

std::string JsonNumber(double v) {
  if (!std::isfinite(v)) return "null";
  char buf[64];
  std::snprintf(buf, sizeof buf, "%.6g", v);
  return buf;
}

std::string JsonArray(const std::vector<double>& values) {
  std::string out = "[";
  for (size_t i = 0; i < values.size(); ++i) {
    if (i) out += ",";
    out += JsonNumber(values[i]);
  }
  return out + "]";
}

std::string JsonString(const std::string& s) {
  std::string out = "\"";
  for (char c : s) {
    if (c == '"' || c == '\\') out += '\\';
    out += c;
  }
  return out + "\"";
}

}  // namespace

std::string FormatReportTable(const std::vector<LabelledReport>& reports) {
  if (reports.empty()) return "";
  const RankingReport& first = reports.front().second;
  const size_t k = first.k;
  std::vector<std::pair<std::string, std::vector<std::string>>> rows;
  auto add = [&](std::string name, auto&& value) {
    std::vector<std::string> cells;
    for (const auto& [label, r] : reports) cells.push_back(value(r));
    rows.emplace_back(std::move(name), std::move(cells));
  };
  add("Recall@" + std::to_string(k), [](const RankingReport& r) { return Fixed(r.recall, 4); });
  add("NDCG@" + std::to_string(k), [](const RankingReport& r) { return Fixed(r.ndcg, 4); });
  add("ARP@" + std::to_string(k), [](const RankingReport& r) { return Fixed(r.arp, 1); });
  add("exposure Gini", [](const RankingReport& r) { return Fixed(r.gini, 3); });
  add("coverage", [](const RankingReport& r) { return Fixed(r.coverage, 3); });
  const size_t groups = first.rec_group_shares.size();
  for (size_t g = 0; g < groups; ++g) {
    std::string name = "share, group " + std::to_string(g + 1);
    if (g == 0) name += " (tail)";
    if (g + 1 == groups) name += " (head)";
    add(name, [g](const RankingReport& r) {
      return g < r.rec_group_shares.size() ? Fixed(r.rec_group_shares[g], 3) : "";
    });
  }
  add("JS(rec, test shares)", [](const RankingReport& r) { return Fixed(r.group_share_js, 3); });
  // Over/under-correction against the test's own shares (core/metrics.h group_share_shift).
  add("shift vs test (+ head)", [](const RankingReport& r) {
    const double v = r.group_shift.shift;
    return std::isnan(v) ? std::string("-") : (v > 0 ? "+" : "") + Fixed(v, 3);
  });
  add("distance to test shares",
      [](const RankingReport& r) { return Fixed(r.group_shift.distance, 3); });
  add("users evaluated", [](const RankingReport& r) { return std::to_string(r.users_evaluated); });

  size_t name_w = 0;
  for (const auto& row : rows) name_w = std::max(name_w, row.first.size());
  std::vector<size_t> col_w;
  for (size_t c = 0; c < reports.size(); ++c) {
    size_t w = reports[c].first.size();
    for (const auto& row : rows) w = std::max(w, row.second[c].size());
    col_w.push_back(w);
  }
  const std::string test_label = "test";
  auto pad_left = [](const std::string& s, size_t w) {
    return std::string(w - std::min(w, s.size()), ' ') + s;
  };
  std::string out = std::string(name_w, ' ');
  for (size_t c = 0; c < reports.size(); ++c) out += "  " + pad_left(reports[c].first, col_w[c]);
  if (groups) out += "  " + pad_left(test_label, 6);
  out += "\n";
  for (size_t r = 0; r < rows.size(); ++r) {
    out += rows[r].first + std::string(name_w - rows[r].first.size(), ' ');
    for (size_t c = 0; c < reports.size(); ++c) out += "  " + pad_left(rows[r].second[c], col_w[c]);
    // The test set's own group shares, beside the recommended shares (rows 5.. 5+groups).
    if (r >= 5 && r < 5 + groups && r - 5 < first.test_group_shares.size()) {
      out += "  " + pad_left(Fixed(first.test_group_shares[r - 5], 3), 6);
    }
    out += "\n";
  }
  return out;
}

std::string FormatReportJson(const std::vector<LabelledReport>& reports, const std::string& extra) {
  std::string out = "{";
  if (!reports.empty()) {
    out += "\"k\":" + std::to_string(reports.front().second.k) + ",";
    out += "\"test_group_shares\":" + JsonArray(reports.front().second.test_group_shares) + ",";
  }
  out += "\"reports\":{";
  for (size_t i = 0; i < reports.size(); ++i) {
    const RankingReport& r = reports[i].second;
    if (i) out += ",";
    out += JsonString(reports[i].first) + ":{";
    out += "\"recall\":" + JsonNumber(r.recall);
    out += ",\"ndcg\":" + JsonNumber(r.ndcg);
    out += ",\"arp\":" + JsonNumber(r.arp);
    out += ",\"gini\":" + JsonNumber(r.gini);
    out += ",\"coverage\":" + JsonNumber(r.coverage);
    out += ",\"group_shares\":" + JsonArray(r.rec_group_shares);
    out += ",\"group_share_js\":" + JsonNumber(r.group_share_js);
    out += ",\"shift\":" + JsonNumber(r.group_shift.shift);
    out += ",\"shift_distance\":" + JsonNumber(r.group_shift.distance);
    out += ",\"users_evaluated\":" + std::to_string(r.users_evaluated);
    out += "}";
  }
  out += "}";
  if (!extra.empty()) out += "," + extra;
  return out + "}\n";
}

std::string FormatTuneTable(const trainer::TuneReport& report, uint32_t k) {
  std::string out;
  char line[256];
  std::snprintf(line, sizeof line, "%-6s %-7s %10s %10s %8s %9s %9s %9s  %s\n", "beta", "k3",
                ("recall@" + std::to_string(k)).c_str(), ("ndcg@" + std::to_string(k)).c_str(),
                "ARP", "shift", "distance", "std.err", "");
  out += line;
  for (const trainer::TuneRow& row : report.rows) {
    const auto& s = row.scores;
    std::snprintf(line, sizeof line, "%-6g %-7g %10.4f %10.4f %8.1f %+9.3f %9.3f %9.4f  %s%s\n",
                  row.candidate.beta, row.candidate.cpr_mix_share, s.recall, s.ndcg, s.arp,
                  s.shift.shift, s.shift.distance, row.standard_error, row.chosen ? "chosen" : "",
                  !row.chosen && row.near_tie ? "near-tie" : "");
    out += line;
  }
  out += "validation split's group shares (tail .. head):";
  for (double v : report.target_group_shares) {
    std::snprintf(line, sizeof line, " %.3f", v);
    out += line;
  }
  out += "\nshift: + toward the head (under-corrected), - toward the tail (over-corrected)\n";
  out += "chosen: " + report.reason + "\n";
  return out;
}

}  // namespace plumb::cli
