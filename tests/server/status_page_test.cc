// plumb-serve's status page built over an in-memory snapshot with hostile item ids: ids
// reach the HTML only as escaped text (and whole in the JSON), no user id reaches either,
// and the history's latency quantiles follow Prometheus' histogram_quantile rule on the
// increase of the request histogram between two samples.
#include "server/status_page.h"

#include <gtest/gtest.h>

#include <cmath>
#include <string>

#include "tests/common/count_text.h"
#include "tests/server/test_model.h"

namespace plumb::server {
namespace {

using ::plumb::testing::CountText;

class ServeStatusPageTest : public ::testing::Test {
 protected:
  void SetUp() override {
    testing::TestModel m = testing::RandomModel(8, 6, 4, 2, 3, false);
    m.item_ids = {"<script>alert(1)</script>", "a\"b'c", std::string("ctl\x01\x1b[2J"),
                  std::string(300, 'x'),       "tool-4", "tool-5"};
    auto snap = testing::BuildSnapshot(m, 7);
    holder_.Swap(snap);
    // Lists served: items 0, 1, 2, 3 most (hand-counted: 0 x4, 1 x3, 2 x2, 3 x1).
    for (std::vector<uint32_t> list : {std::vector<uint32_t>{0, 1, 2, 3}, {0, 1, 2}, {0, 1}, {0}}) {
      window_.Record(*snap, list);
    }
  }
  SnapshotHolder holder_;
  ExposureWindow window_{ExposureWindowOptions{}};
  ServingMetrics metrics_{&holder_, nullptr, nullptr};
};

TEST_F(ServeStatusPageTest, HostileIdsAreTextInTheHtmlAndWholeInTheJson) {
  ServeStatusPage page(&holder_, &window_, &metrics_, nullptr, ServeStatusOptions{});
  page.Sample(1'800'000'000'000);
  const nlohmann::json j = page.Json(1'800'000'000'000);
  ASSERT_EQ(j["top_items"].size(), 4u);
  EXPECT_EQ(j["top_items"][0]["id"], "<script>alert(1)</script>");
  EXPECT_EQ(j["top_items"][0]["served_slots"], 4);
  EXPECT_EQ(j["top_items"][1]["id"], "a\"b'c");
  EXPECT_EQ(j["top_items"][3]["id"], std::string(300, 'x'));
  EXPECT_EQ(j["model"]["version"], 7);

  const std::string html = page.Html(1'800'000'000'000);
  EXPECT_EQ(CountText(html, "<script"), 0u);
  EXPECT_EQ(CountText(html, "&lt;script&gt;alert(1)&lt;/script&gt;"), 1u);
  EXPECT_EQ(CountText(html, "a&quot;b&#39;c"), 1u);
  EXPECT_EQ(CountText(html, "ctl&#xFFFD;&#xFFFD;[2J"), 1u);
  EXPECT_EQ(html.find('\x01'), std::string::npos);
  EXPECT_EQ(html.find('\x1b'), std::string::npos);
  // The 300-byte id is cut at 60 characters.
  EXPECT_EQ(CountText(html, std::string(60, 'x') + "\xE2\x80\xA6"), 1u);
  EXPECT_EQ(CountText(html, std::string(61, 'x')), 0u);
  // No user id anywhere (the model's users are member-0 .. member-7).
  EXPECT_EQ(CountText(html, "member-"), 0u);
  EXPECT_EQ(CountText(j.dump(), "member-"), 0u);
}

TEST_F(ServeStatusPageTest, LatencyQuantilesComeFromTheHistogramIncreaseBetweenSamples) {
  ServeStatusPage page(&holder_, &window_, &metrics_, nullptr, ServeStatusOptions{});
  metrics_.ObserveRequest(RankerMethod::kRecommend, grpc::StatusCode::OK, 0.050);  // before
  page.Sample(1'800'000'000'000);
  for (int i = 0; i < 4; ++i) {
    metrics_.ObserveRequest(RankerMethod::kRecommend, grpc::StatusCode::OK, 0.0015);
  }
  metrics_.ObserveRequest(RankerMethod::kSimilarItems, grpc::StatusCode::NOT_FOUND, 0.0015);
  page.Sample(1'800'000'060'000);
  const nlohmann::json h = page.Json(1'800'000'060'000)["history"];
  ASSERT_EQ(h["time_ms"].size(), 2u);
  // First point: nothing to compare with yet.
  EXPECT_TRUE(h["series"]["p50_ms"][0].is_null());
  // Five calls of 1.5 ms in the bucket (1 ms, 2 ms]: histogram_quantile interpolates
  // p50 = 1 + 1 × 2.5 / 5 = 1.5 ms and p99 = 1 + 1 × 4.95 / 5 = 1.99 ms (the 50 ms call came
  // before the first sample and is not in the increase).
  EXPECT_NEAR(h["series"]["p50_ms"][1].get<double>(), 1.5, 1e-9);
  EXPECT_NEAR(h["series"]["p99_ms"][1].get<double>(), 1.99, 1e-9);
  // Rates per second of the steady clock between the samples: 1 of 5 calls not OK.
  const double all = h["series"]["request_rate"][1].get<double>();
  const double not_ok = h["series"]["not_ok_rate"][1].get<double>();
  EXPECT_GT(all, 0);
  EXPECT_NEAR(not_ok / all, 0.2, 1e-9);
  // The exposure figures were measured at both points.
  EXPECT_TRUE(h["series"]["gini"][0].is_number());
  // The page draws one point per measured value (and lists every value in its table): the
  // measured p50 as a mark and a cell, the unmeasured one as a cell only.
  const std::string html = page.Html(1'800'000'060'000);
  EXPECT_EQ(CountText(html, "data-key=\"p50_ms\" data-value=\"1.5\""), 2u);
  EXPECT_EQ(CountText(html, "data-key=\"p50_ms\" data-value=\"NaN\""), 1u);
}

}  // namespace
}  // namespace plumb::server
