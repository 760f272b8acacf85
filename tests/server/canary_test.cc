// Canary rollouts in plumb-serve: the test, acting as plumb-train, writes a canary into the store
// and a FollowingServer (a secondary, the catch-up loop, the Ranker service over loopback gRPC)
// serves it. Checked: the candidate serves the share set and exactly the subjects
// core/canary_bucket.h names, a subject always gets the same version, each arm's answers are
// its own model's, widening keeps everyone already in, a promotion swaps in the candidate's
// snapshot without building it again, an abort serves everyone the active version, and the
// per-arm exposure gauges count each arm's lists.
#include <grpcpp/grpcpp.h>
#include <gtest/gtest.h>

#include <chrono>
#include <map>
#include <string>
#include <thread>
#include <vector>

#include "core/canary_bucket.h"
#include "plumb/v1/ranker.grpc.pb.h"
#include "server/canary_exposure.h"
#include "server/status_page.h"
#include "tests/server/expected_top.h"
#include "tests/server/loopback_server.h"
#include "tests/server/test_model.h"

namespace plumb::server {
namespace {

using testing::TestModel;

constexpr uint32_t kUsers = 10000, kItems = 200, kDim = 8, kTop = 5;

class CanaryServingTest : public ::testing::Test {
 protected:
  void SetUp() override {
    store::StoreOptions options;
    options.sync = false;
    ASSERT_TRUE(store::Store::OpenPrimary(dir_.Sub("db"), options, &primary_).ok());
    for (uint64_t seed : {11u, 22u, 33u}) {
      models_.push_back(testing::RandomModel(kUsers, kItems, kDim, 0, seed, false));
      uint64_t v = 0;
      ASSERT_TRUE(testing::CommitModel(primary_.get(), models_.back(), seed == 11, &v).ok());
      ASSERT_EQ(v, models_.size());
      snapshots_.push_back(testing::BuildSnapshot(models_.back(), v));
    }
  }

  void SetCanary(uint64_t version, uint32_t share_bp) {
    store::StateChange change;
    change.canary = store::Canary{version, share_bp, 0};
    Status s = primary_->Commit(change);
    ASSERT_TRUE(s.ok()) << s.ToString();
  }

  // Waits until `done` holds (the loop polls every 10 ms).
  template <typename Pred>
  bool WaitFor(Pred done) {
    for (int k = 0; k < 1000; ++k) {
      if (done()) return true;
      std::this_thread::sleep_for(std::chrono::milliseconds(10));
    }
    return false;
  }

  // Recommend for every user once: the version that answered each, checking the answer is that
  // version's model's.
  std::map<std::string, uint64_t> CallEveryone(v1::Ranker::Stub* stub) {
    std::map<std::string, uint64_t> versions;
    for (uint32_t u = 0; u < kUsers; ++u) {
      const std::string user = "member-" + std::to_string(u);
      v1::RecommendRequest request;
      request.set_user_id(user);
      request.set_count(kTop);
      grpc::ClientContext context;
      v1::RecommendResponse response;
      grpc::Status s = stub->Recommend(&context, request, &response);
      if (!s.ok()) {
        ADD_FAILURE() << user << ": " << s.error_message();
        continue;
      }
      const uint64_t v = response.model_version();
      versions[user] = v;
      // Every 20th answer is checked against its model (all of them would only cost time).
      if (u % 20 == 0 && v >= 1 && v <= models_.size()) {
        std::vector<std::string> ids;
        for (const auto& item : response.items()) ids.push_back(item.item_id());
        // The arm serving version v must say what its model says.
        EXPECT_EQ(ids, testing::ExpectedTop(*snapshots_[v - 1], user, kTop)) << user;
      }
    }
    return versions;
  }

  testing::ScratchDir dir_;
  std::unique_ptr<store::Store> primary_;
  std::vector<TestModel> models_;
  std::vector<std::shared_ptr<const Snapshot>> snapshots_;
};

TEST_F(CanaryServingTest, ServesTheShareToAStableSubsetThenPromotesWithoutARebuild) {
  CatchUpOptions follow;
  follow.interval = std::chrono::milliseconds(10);
  testing::FollowingServer serving;
  ExposureWindowOptions window;
  window.window_lists = 100000;
  CanaryExposure exposure(&serving.holder(), window);
  ASSERT_TRUE(serving.Start(dir_.Sub("db"), dir_.Sub("scratch"), follow, &exposure).ok());
  SnapshotHolder& holder = serving.holder();
  auto stub = v1::Ranker::NewStub(serving.channel());

  // Before a canary: everyone gets version 1.
  ASSERT_TRUE(WaitFor([&] { return holder.Get() && holder.Get()->version() == 1; }));
  SetCanary(2, 2000);  // 20 %
  ASSERT_TRUE(WaitFor([&] {
    auto c = holder.GetCanary();
    return c && c->snapshot->version() == 2 && c->share_bp == 2000;
  }));

  // 10,000 calls, one per user: the candidate's share within 1 percentage point of 20 %, and
  // exactly the users the published rule names.
  const std::map<std::string, uint64_t> first = CallEveryone(stub.get());
  ASSERT_EQ(first.size(), kUsers);
  int candidate = 0;
  for (const auto& [user, v] : first) {
    ASSERT_TRUE(v == 1 || v == 2) << user << " got " << v;
    EXPECT_EQ(v == 2, InCanary(user, 2, 2000)) << user;
    candidate += v == 2 ? 1 : 0;
  }
  EXPECT_NEAR(candidate / static_cast<double>(kUsers), 0.20, 0.01);
  std::printf("candidate served %d of %d users (%.2f %%)\n", candidate, kUsers,
              100.0 * candidate / kUsers);
  // The same user always gets the same version.
  EXPECT_EQ(CallEveryone(stub.get()), first);
  // The arms' exposure counts are the calls each served (two passes).
  const CanaryExposure::Counts counts = exposure.counts();
  EXPECT_EQ(counts.candidate_version, 2u);
  EXPECT_EQ(counts.candidate_lists, 2u * candidate);
  EXPECT_EQ(counts.active_lists, 2u * (kUsers - candidate));
  bool candidate_arm_exported = false;
  for (const prometheus::MetricFamily& f : exposure.Collect()) {
    if (f.name != "plumb_canary_exposure_window_lists") continue;
    for (const prometheus::ClientMetric& m : f.metric) {
      if (m.label.size() == 1 && m.label[0].value == "candidate") {
        candidate_arm_exported = true;
        EXPECT_EQ(m.gauge.value, 2.0 * candidate);
      }
    }
  }
  EXPECT_TRUE(candidate_arm_exported);

  // The status page names the canary.
  {
    ServeStatusPage page(&holder, nullptr, nullptr, nullptr, ServeStatusOptions{});
    const nlohmann::json j = page.Json(1'700'000'000'000);
    EXPECT_EQ(j["model"]["canary_version"].get<uint64_t>(), 2u);
    EXPECT_DOUBLE_EQ(j["model"]["canary_share"].get<double>(), 0.2);
    EXPECT_NE(page.Html(1'700'000'000'000).find("version 2 to 20.00 % of the users"),
              std::string::npos);
  }

  // Widening to 50 % keeps every user already in the canary.
  SetCanary(2, 5000);
  ASSERT_TRUE(WaitFor([&] { return holder.GetCanary()->share_bp == 5000; }));
  const std::map<std::string, uint64_t> widened = CallEveryone(stub.get());
  int now_in = 0;
  for (const auto& [user, v] : widened) {
    if (first.at(user) == 2) {
      EXPECT_EQ(v, 2u) << user << " left the canary when it widened";
    }
    now_in += v == 2 ? 1 : 0;
  }
  EXPECT_NEAR(now_in / static_cast<double>(kUsers), 0.50, 0.01);

  // SimilarItems is routed by the item.
  for (uint32_t i = 0; i < kItems; ++i) {
    const std::string item = "tool-" + std::to_string(i);
    v1::SimilarItemsRequest request;
    request.set_item_id(item);
    request.set_count(3);
    grpc::ClientContext context;
    v1::SimilarItemsResponse response;
    ASSERT_TRUE(stub->SimilarItems(&context, request, &response).ok());
    EXPECT_EQ(response.model_version(), InCanary(item, 2, 5000) ? 2u : 1u) << item;
  }

  // Promotion: the candidate's snapshot becomes current as it is, without a new load.
  const Snapshot* candidate_snapshot = holder.GetCanary()->snapshot.get();
  const uint64_t loads_before = serving.loop().loads();
  ASSERT_TRUE(primary_->Activate(2).ok());
  ASSERT_TRUE(WaitFor([&] { return holder.Get()->version() == 2 && !holder.GetCanary(); }));
  EXPECT_EQ(holder.Get().get(), candidate_snapshot);
  EXPECT_EQ(serving.loop().loads(), loads_before + 1);  // counted, not built
  for (const auto& [user, v] : CallEveryone(stub.get())) EXPECT_EQ(v, 2u) << user;

  // Abort: a canary of version 3, then ended; everyone is back on version 2.
  SetCanary(3, 10000);
  ASSERT_TRUE(WaitFor([&] { return holder.GetCanary() != nullptr; }));
  for (const auto& [user, v] : CallEveryone(stub.get())) EXPECT_EQ(v, 3u) << user;
  SetCanary(0, 0);
  ASSERT_TRUE(WaitFor([&] { return holder.GetCanary() == nullptr; }));
  for (const auto& [user, v] : CallEveryone(stub.get())) EXPECT_EQ(v, 2u) << user;
  EXPECT_EQ(serving.loop().failed_loads(), 0u);
  serving.loop().Stop();
  serving.server().Shutdown(std::chrono::milliseconds(1000));
}

}  // namespace
}  // namespace plumb::server
