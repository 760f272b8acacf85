// Inline SVG plots for the status pages: server-side, no script, no fonts fetched. Every
// plot comes with its numbers in a <details> table (readable in a terminal browser), and
// every drawn mark carries its exact value in a data-value attribute, so that a test can
// count the marks and compare them with /status.json.
//
// Marks:  line plots draw one <circle class="point" data-series=S data-value=V> per finite
// value (and polylines between neighbours); bar charts one <rect class="bar"
// data-series=S data-group=G data-value=V> per finite value.
//
// The functions are pure and thread-safe; text that reaches the page is escaped.
#pragma once

#include <cstdint>
#include <string>
#include <vector>

namespace plumb::status {

// The accent colour of popularity group `group` (0 = least popular) of `groups`: the same on
// both processes' pages.
std::string GroupColour(size_t group, size_t groups);
// The name of a popularity group for legends: "group 1 (tail)" ... "group G (head)".
std::string GroupName(size_t group, size_t groups);

struct LineSeries {
  std::string name;            // legend text
  std::string colour;          // CSS colour
  std::vector<double> values;  // one per x; NaN = not measured (a gap)
  bool dashed = false;
  std::string key;  // data-key of its marks and cells (the /status.json series name)
};

struct LinePlot {
  std::string id;  // data-plot attribute and element id prefix (plain ASCII)
  std::string title;
  std::string y_label;           // with its unit, e.g. "requests per second"
  std::vector<int64_t> time_ms;  // x values, ms since the epoch, ascending
  std::vector<LineSeries> series;
  bool y_from_zero = true;  // include 0 in the y range
  std::string note;         // a line under the plot (escaped), may be empty
};

struct BarSeries {
  std::string name;            // legend text, e.g. "served slots"
  std::vector<double> values;  // one per group; may be empty (series not available)
  // How the series is drawn in its groups' colours: 0 solid, 1 light tint, 2 outline.
  int style = 0;
};

struct BarChart {
  std::string id;
  std::string title;
  std::string y_label;  // e.g. "share of slots (0 .. 1)"
  size_t groups = 0;    // categories on the x axis: popularity groups, tail first
  std::vector<BarSeries> series;
  std::string note;
};

// <figure> with the SVG, a legend in words and a <details> table. Empty series are left out.
std::string RenderLinePlot(const LinePlot& plot);
std::string RenderBarChart(const BarChart& chart);

}  // namespace plumb::status
