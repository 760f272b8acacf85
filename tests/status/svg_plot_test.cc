#include "status/svg_plot.h"

#include <gtest/gtest.h>

#include <cmath>
#include <string>

#include "tests/common/count_text.h"

namespace plumb::status {
namespace {

using ::plumb::testing::CountText;

TEST(LinePlot, OnePointPerFiniteValueAndOneTableRowPerTime) {
  LinePlot p;
  p.id = "lift";
  p.title = "popularity lift <b>";
  p.y_label = "ratio";
  p.time_ms = {60000, 120000, 180000, 240000};
  p.series = {{"lift", "#123456", {1.0, std::nan(""), 1.5, 2.0}, false, "lift"},
              {"other", "#654321", {0.5, 0.5, 0.5, 0.5}, true, "other"}};
  const std::string s = RenderLinePlot(p);
  EXPECT_EQ(CountText(s, "<circle class=\"point\""), 7u);
  // The mark and its table cell.
  EXPECT_EQ(CountText(s, "data-series=\"0\" data-key=\"lift\" data-value=\"1.5\""), 2u);
  EXPECT_EQ(CountText(s, "data-key=\"other\""), 8u);
  EXPECT_EQ(CountText(s, "<tr><td>"), 4u);
  // The gap splits the first series' line in two.
  EXPECT_EQ(CountText(s, "<polyline"), 3u);
  EXPECT_EQ(CountText(s, "<b>"), 0u);
  EXPECT_NE(s.find("popularity lift &lt;b&gt;"), std::string::npos);
  EXPECT_NE(s.find("time (UTC)"), std::string::npos);
}

TEST(BarChart, OneBarPerGroupAndSeriesInTheGroupsColours) {
  BarChart c;
  c.id = "groups";
  c.title = "shares";
  c.y_label = "share";
  c.groups = 3;
  c.series = {{"served", {0.2, 0.3, 0.5}, 0},
              {"interactions", {0.33, 0.33, 0.34}, 1},
              {"target (not measured)", {}, 2}};
  const std::string s = RenderBarChart(c);
  EXPECT_EQ(CountText(s, "<rect class=\"bar\""), 6u);
  EXPECT_EQ(CountText(s, "target (not measured)"), 0u);  // an empty series is left out
  for (size_t g = 0; g < 3; ++g) {
    EXPECT_GE(CountText(s, "fill=\"" + GroupColour(g, 3) + "\""), 2u) << g;
  }
  EXPECT_NE(s.find("group 1 (tail)"), std::string::npos);
  EXPECT_NE(s.find("group 3 (head)"), std::string::npos);
}

TEST(GroupColours, TailAndHeadKeepTheirColourWhateverTheGroupCount) {
  for (size_t g = 2; g <= 5; ++g) {
    EXPECT_EQ(GroupColour(0, g), GroupColour(0, 5));
    EXPECT_EQ(GroupColour(g - 1, g), GroupColour(4, 5));
    for (size_t a = 0; a < g; ++a) {
      for (size_t b = a + 1; b < g; ++b) EXPECT_NE(GroupColour(a, g), GroupColour(b, g));
    }
  }
}

}  // namespace
}  // namespace plumb::status
