// plumb-train's status page over a real store: the versions newest first with their gate
// outcome and (escaped) reason, the active marker, the plumb-query commands for the
// rollback and promotion candidates, and rejections by reason in the history.
#include "trainer/online/status_page.h"

#include <gtest/gtest.h>

#include <string>

#include "tests/common/count_text.h"
#include "tests/store/store_fixture.h"
#include "trainer/online/online_loop.h"

namespace plumb::online {
namespace {

using ::plumb::testing::CountText;

class TrainStatusPageTest : public store::testing::StoreFixture {
 protected:
  void SetUp() override {
    StoreFixture::SetUp();
    AddIds(6, 5);
    // v1 passed, v2 passed and active, v3 failed (a reason with markup), v4 passed.
    const store::GateOutcome gates[] = {store::GateOutcome::kPassed, store::GateOutcome::kPassed,
                                        store::GateOutcome::kFailed, store::GateOutcome::kPassed};
    for (int v = 1; v <= 4; ++v) {
      auto version = store::testing::MakeVersion(6, 5, 2, static_cast<float>(v));
      version->write.manifest.gate = gates[v - 1];
      version->write.manifest.gate_reason =
          v == 3 ? "<b>recall</b> dropped & \"worse\"" : "recall held";
      version->write.manifest.validation_recall = 0.1 * v;
      version->write.manifest.validation_k = 20;
      version->write.manifest.created_ms = 1'800'000'000'000 + v * 60'000;
      store::StateChange change;
      change.version = &version->write;
      change.activate_published = v == 2;
      ASSERT_TRUE(store_->Commit(change).ok());
    }
    OnlineOptions options;
    options.dim = 2;
    ASSERT_TRUE(OnlineLoop::Create(store_.get(), options, &loop_).ok());
  }
  TrainMetrics metrics_;
  std::unique_ptr<OnlineLoop> loop_;
};

TEST_F(TrainStatusPageTest, VersionsCommandsAndEscapedReasons) {
  TrainStatusOptions options;
  options.trainer_address = "127.0.0.1:7601";
  TrainStatusPage page(store_.get(), loop_.get(), &metrics_, options);
  page.Sample(1'800'000'300'000);
  metrics_.CountRejected(RejectReason::kFutureTimestamp, 2);
  page.Sample(1'800'000'360'000);

  const nlohmann::json j = page.Json(1'800'000'360'000);
  ASSERT_EQ(j["versions"].size(), 4u);
  EXPECT_EQ(j["versions"][0]["version"], 4);  // newest first
  EXPECT_EQ(j["versions"][1]["gate"], "failed");
  EXPECT_EQ(j["versions"][1]["gate_reason"], "<b>recall</b> dropped & \"worse\"");
  EXPECT_TRUE(j["versions"][2]["active"].get<bool>());
  EXPECT_EQ(j["trainer"]["active_version"], 2);
  EXPECT_EQ(j["trainer"]["events_rejected"]["future_timestamp"], 2.0);
  const nlohmann::json& rejected = j["history"]["series"]["rejected_rate_future_timestamp"];
  ASSERT_EQ(rejected.size(), 2u);
  EXPECT_TRUE(rejected[0].is_null());  // a rate needs two points
  EXPECT_GT(rejected[1].get<double>(), 0.0);
  EXPECT_EQ(j["history"]["series"]["rejected_rate_bad_weight"][1], 0.0);

  const std::string html = page.Html(1'800'000'360'000);
  // Roll back to the newest older version, promote the newest passing newer one (v3 failed).
  EXPECT_EQ(CountText(html, "plumb-query activate --model-version 1 --trainer 127.0.0.1:7601"), 1u);
  EXPECT_EQ(CountText(html, "plumb-query activate --model-version 4 --trainer 127.0.0.1:7601"), 1u);
  EXPECT_EQ(CountText(html, "--model-version 3"), 0u);
  EXPECT_EQ(CountText(html, "&lt;b&gt;recall&lt;/b&gt; dropped &amp; &quot;worse&quot;"), 1u);
  EXPECT_EQ(CountText(html, "<b>"), 0u);
  // One timeline mark per version, one of them active; the reason that occurred has a line.
  EXPECT_EQ(CountText(html, "<g class=\"version\""), 4u);
  EXPECT_EQ(CountText(html, "data-active=\"1\""), 1u);
  EXPECT_EQ(CountText(html, "data-key=\"rejected_rate_future_timestamp\" data-value"),
            3u);  // one mark, a cell per point (the first NaN)
  EXPECT_EQ(CountText(html, "data-key=\"rejected_rate_bad_weight\""), 0u);
  // Read-only: no form, no button; no user ids.
  EXPECT_EQ(CountText(html, "<form"), 0u);
  EXPECT_EQ(CountText(html, "<button"), 0u);
  EXPECT_EQ(CountText(html, "member-"), 0u);
}

}  // namespace
}  // namespace plumb::online
