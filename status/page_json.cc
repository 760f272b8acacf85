#include "status/page_json.h"

#include <cmath>
#include <limits>

namespace plumb::status {

using nlohmann::json;

json JsonNumber(double v) { return std::isfinite(v) ? json(v) : json(nullptr); }

json JsonNumbers(const std::vector<double>& v) {
  json a = json::array();
  for (double x : v) a.push_back(JsonNumber(x));
  return a;
}

std::vector<double> Doubles(const json& array) {
  std::vector<double> out;
  if (!array.is_array()) return out;
  for (const json& x : array) {
    out.push_back(x.is_number() ? x.get<double>() : std::numeric_limits<double>::quiet_NaN());
  }
  return out;
}

double NumberAt(const json& j, const char* key) {
  return j.contains(key) && j[key].is_number() ? j[key].get<double>()
                                               : std::numeric_limits<double>::quiet_NaN();
}

json PageJsonStart(const std::string& process, int64_t now_ms, int64_t history_step_ms,
                   size_t history_capacity) {
  json j;
  j["process"] = process;
  j["now_ms"] = now_ms;
  j["history_step_ms"] = history_step_ms;
  j["history_capacity"] = history_capacity;
  return j;
}

json HistoryJson(const HistoryView& h) {
  json history;
  history["time_ms"] = h.time_ms;
  history["points"] = h.points;
  history["points_added"] = h.added;
  json series = json::object();
  for (size_t s = 0; s < h.names.size(); ++s) series[h.names[s]] = JsonNumbers(h.mean[s]);
  history["series"] = series;
  return history;
}

}  // namespace plumb::status
