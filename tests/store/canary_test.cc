// The store's canary: set, widen, end, promote by activation, never pruned, seen by a secondary,
// checked by Verify and Repair; every refused change leaves the store as it was.
#include <string>
#include <vector>

#include "store/keys.h"
#include "store/raw_records.h"
#include "tests/store/store_fixture.h"

namespace plumb::store {
namespace {

using testing::StoreFixture;

class CanaryTest : public StoreFixture {
 protected:
  void SetUp() override {
    StoreFixture::SetUp();
    StoreOptions options = testing::TestOptions();
    options.keep_versions = 2;
    options.keep_versions_for_ms = 0;
    Open(options);
    AddIds(5, 4);
  }

  Canary Get() {
    Canary c;
    Status s = store_->GetCanary(&c);
    EXPECT_TRUE(s.ok()) << s.ToString();
    return c;
  }

  Status Set(uint64_t version, uint32_t share_bp) {
    StateChange change;
    change.canary = Canary{version, share_bp, 0};
    return store_->Commit(change);
  }
};

TEST_F(CanaryTest, NoneUntilSetThenKeptAcrossAReopen) {
  EXPECT_EQ(Get().version, 0u);
  ASSERT_EQ(Publish(2, 1, true), 1u);
  ASSERT_EQ(Publish(2, 2, false), 2u);
  ASSERT_TRUE(Set(2, 500).ok());
  Canary c = Get();
  EXPECT_EQ(c.version, 2u);
  EXPECT_EQ(c.share_bp, 500u);
  EXPECT_GT(c.started_ms, 1'700'000'000'000);  // set to now: after 2023
  const int64_t started = c.started_ms;
  // Widening keeps when it started; the stored value survives a reopen.
  ASSERT_TRUE(Set(2, 2500).ok());
  Reopen();
  c = Get();
  EXPECT_EQ(c.version, 2u);
  EXPECT_EQ(c.share_bp, 2500u);
  EXPECT_EQ(c.started_ms, started);
  // Ending it.
  ASSERT_TRUE(Set(0, 0).ok());
  EXPECT_EQ(Get().version, 0u);
}

TEST_F(CanaryTest, RefusedChangesNameTheProblemAndChangeNothing) {
  ASSERT_EQ(Publish(2, 1, true), 1u);
  ASSERT_EQ(Publish(2, 2, false), 2u);
  ASSERT_TRUE(Set(2, 100).ok());
  Status s = Set(2, 0);
  EXPECT_TRUE(s.code() == Status::Code::kInvalidArgument) << s.ToString();
  s = Set(2, 10001);
  EXPECT_TRUE(s.code() == Status::Code::kInvalidArgument) << s.ToString();
  EXPECT_NE(s.message().find("10001"), std::string::npos) << s.message();
  s = Set(1, 500);  // the active version
  EXPECT_TRUE(s.code() == Status::Code::kFailedPrecondition) << s.ToString();
  EXPECT_NE(s.message().find("active"), std::string::npos) << s.message();
  s = Set(7, 500);  // not kept
  EXPECT_TRUE(s.IsNotFound()) << s.ToString();
  // A refused canary refuses the whole change: nothing else in it is written either.
  StateChange change;
  change.canary = Canary{7, 500, 0};
  change.meta.emplace_back("note", "should not be written");
  EXPECT_TRUE(store_->Commit(change).IsNotFound());
  std::string note;
  EXPECT_TRUE(store_->GetMeta("note", &note).IsNotFound());
  const Canary c = Get();
  EXPECT_EQ(c.version, 2u);
  EXPECT_EQ(c.share_bp, 100u);
}

TEST_F(CanaryTest, TheCandidateIsNeverPrunedWhileItRuns) {
  ASSERT_EQ(Publish(2, 1, true), 1u);
  ASSERT_EQ(Publish(2, 2, false), 2u);
  ASSERT_TRUE(Set(2, 500).ok());
  for (int k = 3; k <= 6; ++k) Publish(2, static_cast<float>(k), false);
  // keep_versions = 2: 5 and 6, the active 1 and the candidate 2.
  EXPECT_EQ(Listed(), (std::vector<uint64_t>{6, 5, 2, 1}));
  ASSERT_TRUE(Set(0, 0).ok());
  Publish(2, 7, false);
  EXPECT_EQ(Listed(), (std::vector<uint64_t>{7, 6, 1}));
}

TEST_F(CanaryTest, ActivatingTheCandidatePromotesItInTheSameWrite) {
  ASSERT_EQ(Publish(2, 1, true), 1u);
  ASSERT_EQ(Publish(2, 2, false), 2u);
  ASSERT_EQ(Publish(2, 3, false), 3u);
  // Activating another version (a rollback of the active one) keeps the canary.
  ASSERT_TRUE(Set(2, 500).ok());
  ASSERT_TRUE(store_->Activate(3).ok());
  EXPECT_EQ(Get().version, 2u);
  // Store::Activate of the candidate ends it.
  ASSERT_TRUE(store_->Activate(2).ok());
  EXPECT_EQ(Get().version, 0u);
  uint64_t active = 0;
  ASSERT_TRUE(store_->GetActiveVersion(&active).ok());
  EXPECT_EQ(active, 2u);
  // So does a Commit that activates it, and one that publishes and activates at once does not
  // touch a canary of another version.
  ASSERT_TRUE(Set(3, 900).ok());
  StateChange promote;
  promote.activate = 3;
  ASSERT_TRUE(store_->Commit(promote).ok());
  EXPECT_EQ(Get().version, 0u);
  ASSERT_TRUE(Set(2, 900).ok());
  EXPECT_EQ(Publish(2, 4, true), 4u);
  EXPECT_EQ(Get().version, 2u);
}

TEST_F(CanaryTest, ASecondarySeesTheCanary) {
  ASSERT_EQ(Publish(2, 1, true), 1u);
  ASSERT_EQ(Publish(2, 2, false), 2u);
  std::unique_ptr<Store> follower;
  ASSERT_TRUE(Store::OpenSecondary(dir_, scratch_.Sub("follower"), &follower).ok());
  Canary c;
  ASSERT_TRUE(follower->GetCanary(&c).ok());
  EXPECT_EQ(c.version, 0u);
  ASSERT_TRUE(Set(2, 1234).ok());
  ASSERT_TRUE(follower->CatchUp().ok());
  ASSERT_TRUE(follower->GetCanary(&c).ok());
  EXPECT_EQ(c.version, 2u);
  EXPECT_EQ(c.share_bp, 1234u);
}

TEST_F(CanaryTest, ADamagedValueIsCorruptionNamingIt) {
  ASSERT_EQ(Publish(2, 1, true), 1u);
  Close();
  ASSERT_TRUE(testing::PutRawRecord(dir_, keys::kMetaFamily, keys::kMetaCanary, "short").ok());
  Reopen();
  Canary c;
  Status s = store_->GetCanary(&c);
  EXPECT_TRUE(s.IsCorruption()) << s.ToString();
  EXPECT_NE(s.message().find("canary"), std::string::npos) << s.message();
  VerifyReport report;
  ASSERT_TRUE(store_->Verify(&report).ok());
  bool named = false;
  for (const std::string& p : report.problems) named |= p.find("canary") != std::string::npos;
  EXPECT_TRUE(named);
  // Repair ends a canary it cannot read.
  Close();
  RepairReport repaired;
  ASSERT_TRUE(Store::Repair(dir_, options_, &repaired).ok());
  Reopen();
  EXPECT_EQ(Get().version, 0u);
}

}  // namespace
}  // namespace plumb::store
