// The JSON twin of a status page (/status.json) and the page built from it: numbers that may
// be "not measured", and the history ring's view as JSON.
//
// JSON has no NaN: null stands for "not measured" and reads back as NaN. All functions are
// pure and thread-safe.
#pragma once

#include <cstddef>
#include <cstdint>
#include <nlohmann/json.hpp>
#include <string>
#include <vector>

#include "status/history_ring.h"

namespace plumb::status {

// `v` as a JSON number, or null when it is NaN or infinite.
nlohmann::json JsonNumber(double v);
// Each value as JsonNumber does it, in a JSON array.
nlohmann::json JsonNumbers(const std::vector<double>& v);
// A JSON array of numbers back as doubles (null and non-numbers as NaN; not an array: empty).
std::vector<double> Doubles(const nlohmann::json& array);
// j[key] as a double; NaN when absent or not a number.
double NumberAt(const nlohmann::json& j, const char* key);

// The fields every /status.json starts with: {"process", "now_ms", "history_step_ms",
// "history_capacity"}.
nlohmann::json PageJsonStart(const std::string& process, int64_t now_ms, int64_t history_step_ms,
                             size_t history_capacity);

// {"time_ms": [...], "points": [...], "points_added": N, "series": {name: [mean...]}}.
nlohmann::json HistoryJson(const HistoryView& view);

}  // namespace plumb::status
