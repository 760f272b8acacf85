// The parts both status pages share: JSON numbers with null for "not measured", the history
// as JSON, the history note and the figure cards.
#include "status/page_json.h"

#include <gtest/gtest.h>

#include <cmath>
#include <limits>

#include "status/history_section.h"
#include "status/page_shell.h"
#include "tests/common/count_text.h"

namespace plumb::status {
namespace {

const double kNaN = std::numeric_limits<double>::quiet_NaN();

TEST(PageJson, NotMeasuredIsNullAndReadsBackAsNaN) {
  const nlohmann::json a = JsonNumbers({1.5, kNaN, std::numeric_limits<double>::infinity(), 0});
  EXPECT_EQ(a.dump(), "[1.5,null,null,0.0]");
  const std::vector<double> back = Doubles(a);
  ASSERT_EQ(back.size(), 4u);
  EXPECT_EQ(back[0], 1.5);
  EXPECT_TRUE(std::isnan(back[1]));
  EXPECT_TRUE(std::isnan(back[2]));
  EXPECT_EQ(back[3], 0.0);
  EXPECT_TRUE(Doubles(nlohmann::json::object()).empty());
  const nlohmann::json j = {{"x", 2}, {"s", "text"}};
  EXPECT_EQ(NumberAt(j, "x"), 2.0);
  EXPECT_TRUE(std::isnan(NumberAt(j, "s")));
  EXPECT_TRUE(std::isnan(NumberAt(j, "absent")));
}

TEST(PageJson, StartAndHistoryCarryTheRingsView) {
  const nlohmann::json start = PageJsonStart("plumb-x", 1234, 60000, 1440);
  EXPECT_EQ(start["process"], "plumb-x");
  EXPECT_EQ(start["now_ms"], 1234);
  EXPECT_EQ(start["history_step_ms"], 60000);
  EXPECT_EQ(start["history_capacity"], 1440);

  HistoryRing ring({"a", "b"}, 10);
  ASSERT_TRUE(ring.Add(1000, std::vector<double>{1.0, kNaN}).ok());
  ASSERT_TRUE(ring.Add(2000, std::vector<double>{3.0, 4.0}).ok());
  const nlohmann::json h = HistoryJson(ring.Read(10));
  EXPECT_EQ(h["time_ms"], nlohmann::json::array({1000, 2000}));
  EXPECT_EQ(h["points_added"], 2);
  EXPECT_EQ(h["series"]["a"].dump(), "[1.0,3.0]");
  EXPECT_EQ(h["series"]["b"].dump(), "[null,4.0]");

  // The section draws one plot per Plot call over those times, one mark per finite value.
  std::string page;
  HistorySection section(&page, h, 60000, 1440, 240);
  EXPECT_EQ(section.Series("b").size(), 2u);
  EXPECT_TRUE(section.Series("absent").empty());
  section.Plot("ab", "A and B", "units", {{"a", "#000", section.Series("a"), false, "a"}});
  section.End();
  EXPECT_EQ(testing::CountText(page, "data-plot=\"ab\""), 1u);
  EXPECT_EQ(testing::CountText(page, "class=\"point\""), 2u);
  EXPECT_NE(page.find("<section><h2>History</h2>"), std::string::npos);
  EXPECT_NE(page.find("</div></section>"), std::string::npos);
}

TEST(PageShell, HistoryNoteAndStepText) {
  EXPECT_EQ(StepText(3'600'000), "1 h");
  EXPECT_EQ(StepText(300'000), "5 min");
  EXPECT_EQ(StepText(30'000), "30 s");
  EXPECT_EQ(StepText(250), "250 ms");
  // 1440 points a minute apart are 24 h.
  EXPECT_EQ(HistoryNote(60'000, 1440, 240),
            "Points every 1 min, the last 1440 kept (24 h), at most 240 drawn (averaged); kept "
            "in memory only, so a restart starts the history afresh.");
}

TEST(PageShell, CardsCarryKeyExactValueAndEscapedText) {
  std::string s;
  AppendCard(&s, "lift", "popularity lift", 1.25, "ratio");
  EXPECT_NE(s.find("data-key=\"lift\" data-value=\"1.25\""), std::string::npos) << s;
  EXPECT_NE(s.find("<span class=\"unit\">ratio</span>"), std::string::npos) << s;
  std::string t;
  AppendTextCard(&t, "version", "active version", "<none>");
  EXPECT_NE(t.find("&lt;none&gt;"), std::string::npos) << t;
  EXPECT_EQ(t.find("<none>"), std::string::npos) << t;
}

}  // namespace
}  // namespace plumb::status
