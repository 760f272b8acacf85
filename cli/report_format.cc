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
  add("users evaluated",
      [](const RankingReport& r) { return std::to_string(r.users_evaluated); });

  size_t name_w = 0;
  for (const auto& row : rows) name_w = std::max(name_w, row.first.size());
  std::vector<size_t> col_w;
  for (size_t c = 0; c < reports.size(); ++c) {
    size_t w = reports[c].first.size();
    for (const auto& row : rows) w = std::max(w, row.second[c].size());
    col_w.push_back(w);
  }
  const std::string test_label = "test";
  auto pad_left = [](const std::string& s, size_t w) { return std::string(w - std::min(w, s.size()), ' ') + s; };
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

std::string FormatReportJson(const std::vector<LabelledReport>& reports) {
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
    out += ",\"users_evaluated\":" + std::to_string(r.users_evaluated);
    out += "}";
  }
  return out + "}}\n";
}

}  // namespace plumb::cli
