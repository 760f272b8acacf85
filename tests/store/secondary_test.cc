// A secondary (plumb-serve's view) sees the primary's writes after CatchUp(), not before,
// and never half of one write.
#include <atomic>
#include <thread>

#include "tests/store/store_fixture.h"

namespace plumb::store {
namespace {

using testing::StoreFixture;

class SecondaryTest : public StoreFixture {
 protected:
  std::unique_ptr<Store> OpenFollower(const std::string& name = "follower") {
    std::unique_ptr<Store> follower;
    Status s = Store::OpenSecondary(dir_, scratch_.Sub(name), &follower);
    EXPECT_TRUE(s.ok()) << s.ToString();
    return follower;
  }
};

TEST_F(SecondaryTest, SeesAVersionOnlyAfterCatchUp) {
  AddIds(5, 6);
  auto follower = OpenFollower();
  ASSERT_NE(follower, nullptr);
  EXPECT_FALSE(follower->is_primary());
  EXPECT_EQ(follower->IdCount(IdSpace::kUser), 5u);  // what existed at open is visible

  const uint64_t v = Publish(4, 2.0f, /*activate=*/true);
  AppendResult r;
  ASSERT_TRUE(store_->AppendEvents(Loans(3, 0), &r).ok());
  AddIds(2, 0);

  // Before catching up: none of it.
  uint64_t active = 99;
  ASSERT_TRUE(follower->GetActiveVersion(&active).ok());
  EXPECT_EQ(active, 0u);
  std::vector<VersionManifest> versions;
  ASSERT_TRUE(follower->ListVersions(&versions).ok());
  EXPECT_TRUE(versions.empty());
  VersionManifest m;
  EXPECT_TRUE(follower->ReadManifest(v, &m).IsNotFound());
  EXPECT_EQ(follower->LastSequence(), 0u);
  EXPECT_EQ(follower->IdCount(IdSpace::kUser), 5u);

  ASSERT_TRUE(follower->CatchUp().ok());
  ASSERT_TRUE(follower->GetActiveVersion(&active).ok());
  EXPECT_EQ(active, v);
  ASSERT_TRUE(follower->ReadManifest(v, &m).ok());
  std::vector<float> items(size_t{m.num_items} * m.dim);
  ASSERT_TRUE(follower->ReadMatrix(v, MatrixKind::kItems, items).ok());
  EXPECT_EQ(items, testing::PatternMatrix(6, 4, 2.5f));
  EXPECT_EQ(follower->LastSequence(), 3u);
  EXPECT_EQ(follower->IdCount(IdSpace::kUser), 7u);
  std::vector<Event> events;
  ASSERT_TRUE(follower->ReadEvents(0, 10, &events).ok());
  EXPECT_EQ(events.size(), 3u);
}

TEST_F(SecondaryTest, FollowsAcrossFlushesAndAPrimaryRestart) {
  AddIds(3, 3);
  auto follower = OpenFollower();
  ASSERT_NE(follower, nullptr);
  const uint64_t v1 = Publish(2, 1.0f, true);
  Reopen();  // the primary closes (flushing memtables) and starts again
  const uint64_t v2 = Publish(2, 2.0f, true);
  ASSERT_TRUE(follower->CatchUp().ok());
  uint64_t active = 0;
  ASSERT_TRUE(follower->GetActiveVersion(&active).ok());
  EXPECT_EQ(active, v2);
  std::vector<float> users(6);
  ASSERT_TRUE(follower->ReadMatrix(v1, MatrixKind::kUsers, users).ok());
  EXPECT_EQ(users, testing::PatternMatrix(3, 2, 1.0f));
}

// The last commit before a primary restart must reach a follower even if the restarted
// primary writes nothing more (plumb-serve must pick up the version a stopped trainer left).
TEST_F(SecondaryTest, SeesTheLastCommitBeforeAPrimaryRestartWithoutNewWrites) {
  AddIds(3, 3);
  auto follower = OpenFollower();
  ASSERT_NE(follower, nullptr);
  const uint64_t v1 = Publish(2, 1.0f, true);
  Reopen();  // closes and opens again; no write after that
  ASSERT_TRUE(follower->CatchUp().ok());
  uint64_t active = 0;
  ASSERT_TRUE(follower->GetActiveVersion(&active).ok());
  EXPECT_EQ(active, v1);
  std::vector<float> users(6);
  ASSERT_TRUE(follower->ReadMatrix(v1, MatrixKind::kUsers, users).ok());
  EXPECT_EQ(users, testing::PatternMatrix(3, 2, 1.0f));
  // And with the primary closed altogether.
  const uint64_t v2 = Publish(2, 2.0f, true);
  store_.reset();
  ASSERT_TRUE(follower->CatchUp().ok());
  ASSERT_TRUE(follower->GetActiveVersion(&active).ok());
  EXPECT_EQ(active, v2);
}

TEST_F(SecondaryTest, IsReadOnly) {
  auto follower = OpenFollower();
  ASSERT_NE(follower, nullptr);
  AppendResult r;
  EXPECT_EQ(follower->AppendEvents(Loans(1, 0), &r).code(), Status::Code::kFailedPrecondition);
  EXPECT_EQ(follower->Commit(StateChange()).code(), Status::Code::kFailedPrecondition);
  EXPECT_EQ(follower->Activate(1).code(), Status::Code::kFailedPrecondition);
  EXPECT_TRUE(store_->CatchUp().ok());  // a no-op on the primary
}

TEST_F(SecondaryTest, NoStoreNoSecondary) {
  std::unique_ptr<Store> follower;
  EXPECT_FALSE(Store::OpenSecondary(scratch_.Sub("absent"), scratch_.Sub("f"), &follower).ok());
  EXPECT_EQ(follower, nullptr);
}

// Reads racing catch-ups: every matrix of version v is filled with the value v, so a read
// that mixed two states would show a foreign value. Pruning (keep 2) makes reads of old
// versions fail with NotFound; anything else is a failure.
TEST_F(SecondaryTest, ReadsNeverSeeHalfACatchUp) {
  StoreOptions options = testing::TestOptions();
  options.keep_versions = 2;
  options.keep_versions_for_ms = 0;  // by count only
  options.rows_per_block = 8;
  Open(options);
  AddIds(64, 64);
  constexpr uint32_t kDim = 8;
  auto publish_filled = [&](bool activate) {
    auto v = testing::MakeVersion(64, 64, kDim, 0);
    // Version numbers are consecutive from 1 here; fill with the number it will get.
    std::vector<VersionManifest> listed;
    EXPECT_TRUE(store_->ListVersions(&listed).ok());
    const uint64_t next = listed.empty() ? 1 : listed.front().version + 1;
    std::fill(v->users.begin(), v->users.end(), static_cast<float>(next));
    std::fill(v->items.begin(), v->items.end(), static_cast<float>(next));
    v->write.manifest.version = next;
    StateChange change;
    change.version = &v->write;
    change.activate_published = activate;
    EXPECT_TRUE(store_->Commit(change).ok());
  };
  publish_filled(true);
  auto follower = OpenFollower();
  ASSERT_NE(follower, nullptr);

  std::atomic<bool> stop{false};
  std::atomic<int> good_reads{0};
  std::atomic<int> bad_reads{0};
  std::thread catcher([&] {
    while (!stop) {
      EXPECT_TRUE(follower->CatchUp().ok());
      std::this_thread::sleep_for(std::chrono::milliseconds(1));
    }
  });
  std::thread reader([&] {
    std::vector<float> m(64 * kDim);
    while (!stop) {
      uint64_t active = 0;
      EXPECT_TRUE(follower->GetActiveVersion(&active).ok());
      Status s = follower->ReadMatrix(active, MatrixKind::kItems, m);
      if (s.IsNotFound()) continue;  // pruned between the two calls
      if (!s.ok()) {
        ++bad_reads;
        ADD_FAILURE() << s.ToString();
        continue;
      }
      for (float x : m) {
        if (x != static_cast<float>(active)) {
          ++bad_reads;
          break;
        }
      }
      ++good_reads;
    }
  });
  for (int k = 0; k < 40; ++k) {
    publish_filled(true);
    std::this_thread::sleep_for(std::chrono::milliseconds(2));
  }
  stop = true;
  catcher.join();
  reader.join();
  EXPECT_EQ(bad_reads.load(), 0);
  EXPECT_GT(good_reads.load(), 0);
}

}  // namespace
}  // namespace plumb::store
