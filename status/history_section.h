// HistorySection: the "History" section of a status page, built from the page's JSON twin:
// the heading, the note on the spacing of the points (HistoryNote), then line plots over the
// history's times in a two-column grid.
//
// Use: construct (appends the section's start to *page), Plot per figure, End. Not
// thread-safe; one per page render.
#pragma once

#include <cstddef>
#include <cstdint>
#include <nlohmann/json.hpp>
#include <string>
#include <vector>

#include "status/svg_plot.h"

namespace plumb::status {

class HistorySection {
 public:
  // `history` is the "history" object of HistoryJson; `page` and `history` must outlive this
  // object.
  HistorySection(std::string* page, const nlohmann::json& history, int64_t step_ms,
                 size_t history_points, size_t plot_points);

  // The means of series `name`, one per time (NaN where not measured; empty if absent).
  std::vector<double> Series(const std::string& name) const;

  // Appends a line plot of `lines` over the history's times; `note` goes under it.
  void Plot(const std::string& id, const std::string& title, const std::string& y_label,
            std::vector<LineSeries> lines, const std::string& note = "");

  // Closes the grid and the section.
  void End();

 private:
  std::string* page_;
  const nlohmann::json& history_;
  std::vector<int64_t> times_;
};

}  // namespace plumb::status
