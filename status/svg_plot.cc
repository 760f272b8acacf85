#include "status/svg_plot.h"

#include <algorithm>
#include <cmath>
#include <cstdio>

#include "status/html.h"

namespace plumb::status {
namespace {

constexpr double kWidth = 640, kHeight = 230;
constexpr double kLeft = 72, kRight = 16, kTop = 14, kBottom = 46;

// Accent colours, tail to head; chosen for this project (calm, distinguishable in print and
// for the common colour-vision deficiencies thanks to the lightness steps).
constexpr const char* kPalette[] = {"#1b7f79", "#4a78b5", "#7d5ba6", "#c2793a",
                                    "#b23b3b", "#5f8f3a", "#9c6b2f", "#52606d"};

std::string Num(double v) {
  char buf[32];
  std::snprintf(buf, sizeof buf, "%.1f", v);
  return buf;
}

double NiceStep(double range, int target_ticks) {
  const double raw = range / target_ticks;
  const double mag = std::pow(10.0, std::floor(std::log10(raw)));
  const double r = raw / mag;
  const double nice = r < 1.5 ? 1 : r < 3 ? 2 : r < 7 ? 5 : 10;
  return nice * mag;
}

struct Axis {
  double lo = 0, hi = 1;
  std::vector<double> ticks;
};

Axis ValueAxis(double lo, double hi, bool from_zero) {
  Axis a;
  if (!std::isfinite(lo) || !std::isfinite(hi)) lo = 0, hi = 1;
  if (from_zero) lo = std::min(lo, 0.0), hi = std::max(hi, 0.0);
  if (hi - lo < 1e-12) {
    const double pad = std::fabs(hi) > 0 ? std::fabs(hi) * 0.1 : 1.0;
    lo -= from_zero && lo >= 0 ? 0 : pad;
    hi += pad;
  }
  const double step = NiceStep(hi - lo, 4);
  a.lo = std::floor(lo / step) * step;
  a.hi = std::ceil(hi / step) * step;
  for (double t = a.lo; t <= a.hi + step * 1e-6; t += step) a.ticks.push_back(t);
  return a;
}

void YAxis(std::string* s, const Axis& a, const std::string& label) {
  const double plot_h = kHeight - kTop - kBottom;
  for (double t : a.ticks) {
    const double y = kTop + plot_h * (1 - (t - a.lo) / (a.hi - a.lo));
    *s += "<line class=\"grid\" x1=\"" + Num(kLeft) + "\" x2=\"" + Num(kWidth - kRight) +
          "\" y1=\"" + Num(y) + "\" y2=\"" + Num(y) + "\"/>";
    *s += "<text class=\"tick\" x=\"" + Num(kLeft - 6) + "\" y=\"" + Num(y + 4) +
          "\" text-anchor=\"end\">" + FormatNumber(std::fabs(t) < 1e-12 ? 0.0 : t, 3) + "</text>";
  }
  *s += "<text class=\"axis-label\" transform=\"translate(14 " + Num(kTop + plot_h / 2) +
        ") rotate(-90)\" text-anchor=\"middle\">";
  AppendEscaped(s, label);
  *s += "</text>";
  *s += "<line class=\"axis\" x1=\"" + Num(kLeft) + "\" x2=\"" + Num(kLeft) + "\" y1=\"" +
        Num(kTop) + "\" y2=\"" + Num(kHeight - kBottom) + "\"/>";
  *s += "<line class=\"axis\" x1=\"" + Num(kLeft) + "\" x2=\"" + Num(kWidth - kRight) + "\" y1=\"" +
        Num(kHeight - kBottom) + "\" y2=\"" + Num(kHeight - kBottom) + "\"/>";
}

void Legend(std::string* s, const std::vector<std::pair<std::string, std::string>>& entries) {
  *s += "<ul class=\"legend\">";
  for (const auto& [name, swatch_style] : entries) {
    *s += "<li><span class=\"swatch\" style=\"" + swatch_style + "\"></span>";
    AppendEscaped(s, name);
    *s += "</li>";
  }
  *s += "</ul>";
}

std::string TimeTick(int64_t ms, int64_t step_ms) {
  if (step_ms >= 60000) return FormatUtcMinute(ms);
  const std::string full = FormatUtc(ms);  // "YYYY-MM-DD HH:MM:SS UTC"
  return full.size() >= 19 ? full.substr(11, 8) : full;
}

}  // namespace

std::string GroupColour(size_t group, size_t groups) {
  constexpr size_t n = sizeof(kPalette) / sizeof(kPalette[0]);
  if (groups <= 5) {
    // Spread a few groups over the first five colours so that tail and head always get the
    // two ends (teal and brick red) whatever G is.
    static constexpr size_t pick[6][5] = {{0},          {0, 4},          {0, 2, 4},
                                          {0, 1, 3, 4}, {0, 1, 2, 3, 4}, {0}};
    if (groups == 0) return kPalette[0];
    return kPalette[pick[groups - 1][std::min(group, groups - 1)]];
  }
  return kPalette[group % n];
}

std::string GroupName(size_t group, size_t groups) {
  std::string name = "group " + std::to_string(group + 1);
  if (groups > 1 && group == 0) name += " (tail)";
  if (groups > 1 && group + 1 == groups) name += " (head)";
  return name;
}

std::string RenderLinePlot(const LinePlot& p) {
  std::string s;
  s += "<figure class=\"plot\" id=\"" + p.id + "\"><figcaption>";
  AppendEscaped(&s, p.title);
  s += "</figcaption>";
  double lo = INFINITY, hi = -INFINITY;
  for (const LineSeries& series : p.series) {
    for (double v : series.values) {
      if (!std::isfinite(v)) continue;
      lo = std::min(lo, v);
      hi = std::max(hi, v);
    }
  }
  const Axis a = ValueAxis(lo, hi, p.y_from_zero);
  const size_t n = p.time_ms.size();
  const int64_t t0 = n ? p.time_ms.front() : 0, t1 = n ? p.time_ms.back() : 0;
  const double plot_w = kWidth - kLeft - kRight, plot_h = kHeight - kTop - kBottom;
  auto x_of = [&](int64_t t) {
    if (t1 == t0) return kLeft + plot_w / 2;
    return kLeft + plot_w * static_cast<double>(t - t0) / static_cast<double>(t1 - t0);
  };
  auto y_of = [&](double v) { return kTop + plot_h * (1 - (v - a.lo) / (a.hi - a.lo)); };

  s += "<svg xmlns=\"http://www.w3.org/2000/svg\" role=\"img\" viewBox=\"0 0 " + Num(kWidth) + " " +
       Num(kHeight) + "\" data-plot=\"" + p.id + "\" aria-label=\"";
  AppendEscaped(&s, p.title);
  s += "\">";
  YAxis(&s, a, p.y_label);
  // Time ticks.
  if (n > 0) {
    static constexpr int64_t steps[] = {1000,    2000,    5000,     10000,    15000,   30000,
                                        60000,   120000,  300000,   600000,   900000,  1800000,
                                        3600000, 7200000, 10800000, 21600000, 43200000};
    int64_t step = steps[sizeof(steps) / sizeof(steps[0]) - 1];
    for (int64_t candidate : steps) {
      if ((t1 - t0) / candidate <= 6) {
        step = candidate;
        break;
      }
    }
    for (int64_t t = (t0 + step - 1) / step * step; t <= t1; t += step) {
      const double x = x_of(t);
      s += "<line class=\"tickmark\" x1=\"" + Num(x) + "\" x2=\"" + Num(x) + "\" y1=\"" +
           Num(kHeight - kBottom) + "\" y2=\"" + Num(kHeight - kBottom + 4) + "\"/>";
      // A label near the right end is right-aligned so that it stays inside the plot.
      const char* anchor = x > kWidth - kRight - 24 ? "end" : "middle";
      s += "<text class=\"tick\" x=\"" + Num(x) + "\" y=\"" + Num(kHeight - kBottom + 16) +
           "\" text-anchor=\"" + anchor + "\">" + TimeTick(t, step) + "</text>";
    }
  }
  s += "<text class=\"axis-label\" x=\"" + Num(kLeft + plot_w / 2) + "\" y=\"" + Num(kHeight - 6) +
       "\" text-anchor=\"middle\">time (UTC)</text>";
  for (size_t si = 0; si < p.series.size(); ++si) {
    const LineSeries& series = p.series[si];
    const std::string dash = series.dashed ? " stroke-dasharray=\"5 3\"" : "";
    std::string segment;
    auto flush = [&] {
      if (!segment.empty()) {
        s += "<polyline class=\"line\" fill=\"none\" stroke=\"" + series.colour + "\"" + dash +
             " points=\"" + segment + "\"/>";
      }
      segment.clear();
    };
    for (size_t i = 0; i < n && i < series.values.size(); ++i) {
      const double v = series.values[i];
      if (!std::isfinite(v)) {
        flush();
        continue;
      }
      if (!segment.empty()) segment += ' ';
      segment += Num(x_of(p.time_ms[i])) + "," + Num(y_of(v));
    }
    flush();
    for (size_t i = 0; i < n && i < series.values.size(); ++i) {
      const double v = series.values[i];
      if (!std::isfinite(v)) continue;
      s += "<circle class=\"point\" r=\"2.2\" fill=\"" + series.colour + "\" cx=\"" +
           Num(x_of(p.time_ms[i])) + "\" cy=\"" + Num(y_of(v)) + "\" data-series=\"" +
           std::to_string(si) + "\" data-key=\"" + series.key + "\" data-value=\"" +
           ExactNumber(v) + "\"><title>";
      AppendEscaped(&s, series.name);
      s += " " + FormatNumber(v, 4) + " at " + FormatUtc(p.time_ms[i]) + "</title></circle>";
    }
  }
  if (n == 0) {
    s += "<text class=\"empty\" x=\"" + Num(kLeft + plot_w / 2) + "\" y=\"" +
         Num(kTop + plot_h / 2) + "\" text-anchor=\"middle\">no points yet</text>";
  }
  s += "</svg>";
  std::vector<std::pair<std::string, std::string>> legend;
  for (const LineSeries& series : p.series) {
    legend.push_back({series.name, "background:" + series.colour +
                                       (series.dashed ? ";height:2px;margin-bottom:3px" : "")});
  }
  Legend(&s, legend);
  if (!p.note.empty()) {
    s += "<p class=\"note\">";
    AppendEscaped(&s, p.note);
    s += "</p>";
  }
  s += "<details><summary>numbers (" + std::to_string(n) +
       " points)</summary><table class=\"numbers\" data-table=\"" + p.id +
       "\"><thead><tr><th>time (UTC)</th>";
  for (const LineSeries& series : p.series) {
    s += "<th>";
    AppendEscaped(&s, series.name);
    s += "</th>";
  }
  s += "</tr></thead><tbody>";
  for (size_t i = 0; i < n; ++i) {
    s += "<tr><td>" + FormatUtc(p.time_ms[i]) + "</td>";
    for (size_t si = 0; si < p.series.size(); ++si) {
      const double v = i < p.series[si].values.size() ? p.series[si].values[i] : NAN;
      s += "<td data-series=\"" + std::to_string(si) + "\" data-key=\"" + p.series[si].key +
           "\" data-value=\"" + ExactNumber(v) + "\">" + FormatNumber(v, 4) + "</td>";
    }
    s += "</tr>";
  }
  s += "</tbody></table></details></figure>";
  return s;
}

std::string RenderBarChart(const BarChart& c) {
  std::vector<const BarSeries*> shown;
  for (const BarSeries& series : c.series) {
    if (series.values.size() == c.groups && c.groups > 0) shown.push_back(&series);
  }
  std::string s;
  s += "<figure class=\"plot wide\" id=\"" + c.id + "\"><figcaption>";
  AppendEscaped(&s, c.title);
  s += "</figcaption>";
  double hi = 0;
  for (const BarSeries* series : shown) {
    for (double v : series->values) {
      if (std::isfinite(v)) hi = std::max(hi, v);
    }
  }
  const Axis a = ValueAxis(0, hi, true);
  const double plot_w = kWidth - kLeft - kRight, plot_h = kHeight - kTop - kBottom;
  auto y_of = [&](double v) { return kTop + plot_h * (1 - (v - a.lo) / (a.hi - a.lo)); };
  s += "<svg xmlns=\"http://www.w3.org/2000/svg\" role=\"img\" viewBox=\"0 0 " + Num(kWidth) + " " +
       Num(kHeight) + "\" data-plot=\"" + c.id + "\" aria-label=\"";
  AppendEscaped(&s, c.title);
  s += "\">";
  YAxis(&s, a, c.y_label);
  const double slot = c.groups ? plot_w / static_cast<double>(c.groups) : plot_w;
  const double bar_w = shown.empty() ? 0 : std::min(28.0, slot * 0.8 / shown.size());
  for (size_t g = 0; g < c.groups; ++g) {
    const std::string colour = GroupColour(g, c.groups);
    const double x0 = kLeft + slot * g + (slot - bar_w * shown.size()) / 2;
    for (size_t si = 0; si < shown.size(); ++si) {
      const double v = shown[si]->values[g];
      if (!std::isfinite(v)) continue;
      const double y = y_of(std::max(0.0, v));
      const double h = std::max(0.0, kTop + plot_h - y);
      std::string style;
      switch (shown[si]->style) {
        case 1:
          style = "fill=\"" + colour + "\" fill-opacity=\"0.35\" stroke=\"" + colour + "\"";
          break;
        case 2:
          style = "fill=\"#ffffff\" stroke=\"" + colour + "\" stroke-width=\"1.5\" " +
                  "stroke-dasharray=\"3 2\"";
          break;
        default:
          style = "fill=\"" + colour + "\"";
      }
      s += "<rect class=\"bar\" " + style + " x=\"" + Num(x0 + bar_w * si + 1) + "\" y=\"" +
           Num(y) + "\" width=\"" + Num(bar_w - 2) + "\" height=\"" + Num(h) + "\" data-series=\"" +
           std::to_string(si) + "\" data-group=\"" + std::to_string(g) + "\" data-value=\"" +
           ExactNumber(v) + "\"><title>";
      AppendEscaped(&s, GroupName(g, c.groups) + ", " + shown[si]->name + ": ");
      s += FormatNumber(v, 4) + "</title></rect>";
    }
    s += "<text class=\"tick\" x=\"" + Num(kLeft + slot * (g + 0.5)) + "\" y=\"" +
         Num(kHeight - kBottom + 16) + "\" text-anchor=\"middle\">" + GroupName(g, c.groups) +
         "</text>";
  }
  s += "<text class=\"axis-label\" x=\"" + Num(kLeft + plot_w / 2) + "\" y=\"" + Num(kHeight - 6) +
       "\" text-anchor=\"middle\">popularity group (items by training degree, equal "
       "interaction mass)</text>";
  if (shown.empty()) {
    s += "<text class=\"empty\" x=\"" + Num(kLeft + plot_w / 2) + "\" y=\"" +
         Num(kTop + plot_h / 2) + "\" text-anchor=\"middle\">nothing measured yet</text>";
  }
  s += "</svg>";
  std::vector<std::pair<std::string, std::string>> legend;
  for (const BarSeries* series : shown) {
    const char* styles[] = {"background:#555", "background:#bbb;border:1px solid #555",
                            "background:#fff;border:1px dashed #555"};
    legend.push_back({series->name + (series->style == 0   ? " (solid bars)"
                                      : series->style == 1 ? " (light bars)"
                                                           : " (dashed outlines)"),
                      styles[std::clamp(series->style, 0, 2)]});
  }
  for (size_t g = 0; g < c.groups; ++g) {
    legend.push_back({GroupName(g, c.groups), "background:" + GroupColour(g, c.groups)});
  }
  Legend(&s, legend);
  if (!c.note.empty()) {
    s += "<p class=\"note\">";
    AppendEscaped(&s, c.note);
    s += "</p>";
  }
  s += "<details><summary>numbers</summary><table class=\"numbers\" data-table=\"" + c.id +
       "\"><thead><tr><th>group</th>";
  for (const BarSeries* series : shown) {
    s += "<th>";
    AppendEscaped(&s, series->name);
    s += "</th>";
  }
  s += "</tr></thead><tbody>";
  for (size_t g = 0; g < c.groups; ++g) {
    s += "<tr><td>" + GroupName(g, c.groups) + "</td>";
    for (size_t si = 0; si < shown.size(); ++si) {
      const double v = shown[si]->values[g];
      s += "<td data-series=\"" + std::to_string(si) + "\" data-group=\"" + std::to_string(g) +
           "\" data-value=\"" + ExactNumber(v) + "\">" + FormatNumber(v, 4) + "</td>";
    }
    s += "</tr>";
  }
  s += "</tbody></table></details></figure>";
  return s;
}

}  // namespace plumb::status
