#include "status/history_section.h"

#include "status/html.h"
#include "status/page_json.h"
#include "status/page_shell.h"

namespace plumb::status {

HistorySection::HistorySection(std::string* page, const nlohmann::json& history, int64_t step_ms,
                               size_t history_points, size_t plot_points)
    : page_(page), history_(history), times_(history["time_ms"].get<std::vector<int64_t>>()) {
  *page_ += "<section><h2>History</h2><p class=\"note\">";
  AppendEscaped(page_, HistoryNote(step_ms, history_points, plot_points));
  *page_ += "</p><div class=\"grid2\">";
}

std::vector<double> HistorySection::Series(const std::string& name) const {
  const nlohmann::json& series = history_["series"];
  return series.contains(name) ? Doubles(series[name]) : std::vector<double>();
}

void HistorySection::Plot(const std::string& id, const std::string& title,
                          const std::string& y_label, std::vector<LineSeries> lines,
                          const std::string& note) {
  LinePlot p;
  p.id = id;
  p.title = title;
  p.y_label = y_label;
  p.time_ms = times_;
  p.series = std::move(lines);
  p.note = note;
  *page_ += RenderLinePlot(p);
}

void HistorySection::End() { *page_ += "</div></section>"; }

}  // namespace plumb::status
