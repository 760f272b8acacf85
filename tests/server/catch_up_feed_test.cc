// CatchUpLoop following a VersionFeed (plumb-serve --replica-of) instead of a store, with an
// in-memory feed: the version it names is loaded and swapped in with the withdrawn items that
// came with it; a version that fails to load is skipped until the feed names another (or
// names none, after which it may offer the same one again); a feed's NotFound is reported as
// the feed worded it; the canary is loaded beside the active version, and a promotion swaps
// in the canary's snapshot and withdrawn items without loading them again.
#include <gtest/gtest.h>

#include <map>
#include <set>
#include <string>
#include <vector>

#include "server/catch_up_loop.h"
#include "server/version_feed.h"
#include "tests/server/test_model.h"

namespace plumb::server {
namespace {

using testing::TestModel;

// A feed that holds `models`; versions in `broken` fail to load as damaged, versions it does
// not hold as NotFound. Every Load call is recorded.
class MemoryFeed : public VersionFeed {
 public:
  Status ActiveVersion(uint64_t* version) override {
    *version = active;
    return Status::Ok();
  }
  Status Canary(uint64_t* version, uint32_t* share) override {
    *version = canary;
    *share = share_bp;
    return Status::Ok();
  }
  Status Load(uint64_t version, const ApproxServingOptions& approx,
              std::shared_ptr<const Snapshot>* out, std::vector<std::string>* ids) override {
    loaded.push_back(version);
    if (broken.count(version) != 0) {
      return Status::Corruption("version " + std::to_string(version) + " is damaged");
    }
    auto it = models.find(version);
    if (it == models.end()) {
      return Status::NotFound("the feed has no version " + std::to_string(version));
    }
    *out = testing::BuildSnapshot(it->second, version, approx);
    *ids = withdrawn[version];
    return Status::Ok();
  }

  uint64_t active = 0, canary = 0;
  uint32_t share_bp = 0;
  std::map<uint64_t, TestModel> models;
  std::map<uint64_t, std::vector<std::string>> withdrawn;
  std::set<uint64_t> broken;
  std::vector<uint64_t> loaded;
};

class CatchUpFeedTest : public ::testing::Test {
 protected:
  CatchUpFeedTest() {
    for (uint64_t v = 1; v <= 3; ++v) feed_.models[v] = testing::RandomModel(5, 20, 4, 2, v, false);
    options_.on_swap = [this](const Snapshot& s, double) { swapped_.push_back(s.version()); };
    options_.on_load_failure = [this](uint64_t v, const Status&) { failed_.push_back(v); };
  }

  MemoryFeed feed_;
  SnapshotHolder holder_;
  CatchUpOptions options_;
  std::vector<uint64_t> swapped_, failed_;
};

TEST_F(CatchUpFeedTest, ServesTheNamedVersionWithTheWithdrawnItemsThatCameWithIt) {
  CatchUpLoop loop(&feed_, &holder_, options_);
  ASSERT_TRUE(loop.RunOnce().ok());  // the feed names nothing yet
  EXPECT_EQ(holder_.Get(), nullptr);
  EXPECT_EQ(loop.loads(), 0u);

  feed_.active = 1;
  feed_.withdrawn[1] = {"tool-3"};
  ASSERT_TRUE(loop.RunOnce().ok());
  ASSERT_NE(holder_.Get(), nullptr);
  EXPECT_EQ(holder_.Get()->version(), 1u);
  std::shared_ptr<const WithdrawnItems> w = holder_.GetWithdrawn();
  ASSERT_NE(w, nullptr);
  EXPECT_EQ(w->generation(), 1u);  // a feed's withdrawn items are numbered by their version
  EXPECT_TRUE(w->BuiltFor(1));
  EXPECT_TRUE(w->Contains("tool-3"));
  EXPECT_TRUE(w->ContainsRow(3));
  ASSERT_TRUE(loop.RunOnce().ok());  // nothing new: no reload
  EXPECT_EQ(feed_.loaded, (std::vector<uint64_t>{1}));

  feed_.active = 2;
  feed_.withdrawn[2] = {"tool-4", "tool-5"};
  ASSERT_TRUE(loop.RunOnce().ok());
  EXPECT_EQ(holder_.Get()->version(), 2u);
  w = holder_.GetWithdrawn();
  EXPECT_EQ(w->generation(), 2u);
  EXPECT_TRUE(w->BuiltFor(2));
  EXPECT_EQ(w->size(), 2u);
  EXPECT_FALSE(w->Contains("tool-3"));
  EXPECT_EQ(swapped_, (std::vector<uint64_t>{1, 2}));
  EXPECT_EQ(loop.loads(), 2u);
  EXPECT_EQ(loop.swaps(), 2u);
  EXPECT_EQ(loop.failed_loads(), 0u);
}

TEST_F(CatchUpFeedTest, SkipsAFailedVersionUntilTheFeedNamesAnotherOrNone) {
  CatchUpLoop loop(&feed_, &holder_, options_);
  feed_.active = 1;
  ASSERT_TRUE(loop.RunOnce().ok());

  feed_.active = 2;
  feed_.broken.insert(2);
  Status s = loop.RunOnce();
  EXPECT_TRUE(s.IsCorruption()) << s.ToString();
  EXPECT_EQ(holder_.Get()->version(), 1u);  // the old version keeps serving
  ASSERT_TRUE(loop.RunOnce().ok());         // not retried every round
  EXPECT_EQ(feed_.loaded, (std::vector<uint64_t>{1, 2}));
  EXPECT_EQ(loop.failed_loads(), 1u);

  // The feed withdraws the version (names none), then offers it again, repaired: tried again.
  feed_.active = 0;
  ASSERT_TRUE(loop.RunOnce().ok());
  EXPECT_EQ(holder_.Get()->version(), 1u);
  feed_.broken.clear();
  feed_.active = 2;
  ASSERT_TRUE(loop.RunOnce().ok());
  EXPECT_EQ(holder_.Get()->version(), 2u);

  // A version the feed does not hold: its NotFound, worded by the feed, not explained as a
  // store's missing table file would be.
  feed_.active = 7;
  s = loop.RunOnce();
  EXPECT_TRUE(s.IsNotFound()) << s.ToString();
  EXPECT_EQ(s.message(), "the feed has no version 7");
  EXPECT_EQ(holder_.Get()->version(), 2u);
  EXPECT_EQ(failed_, (std::vector<uint64_t>{2, 7}));
  EXPECT_EQ(swapped_, (std::vector<uint64_t>{1, 2}));
  EXPECT_EQ(loop.failed_loads(), 2u);
}

TEST_F(CatchUpFeedTest, ACanaryIsBuiltBesideTheActiveVersionAndPromotedWithoutARebuild) {
  CatchUpLoop loop(&feed_, &holder_, options_);
  feed_.active = 1;
  feed_.withdrawn[1] = {"tool-1"};
  feed_.canary = 2;
  feed_.share_bp = 2500;
  feed_.withdrawn[2] = {"tool-9"};
  ASSERT_TRUE(loop.RunOnce().ok());
  EXPECT_EQ(holder_.Get()->version(), 1u);
  std::shared_ptr<const CanaryArm> arm = holder_.GetCanary();
  ASSERT_NE(arm, nullptr);
  EXPECT_EQ(arm->snapshot->version(), 2u);
  EXPECT_EQ(arm->share_bp, 2500u);
  // Until the promotion the active version's withdrawn items apply.
  EXPECT_EQ(holder_.GetWithdrawn()->generation(), 1u);
  EXPECT_TRUE(holder_.GetWithdrawn()->Contains("tool-1"));
  EXPECT_EQ(loop.loads(), 2u);

  // A new share changes only the share.
  feed_.share_bp = 5000;
  ASSERT_TRUE(loop.RunOnce().ok());
  EXPECT_EQ(holder_.GetCanary()->share_bp, 5000u);
  EXPECT_EQ(holder_.GetCanary()->snapshot, arm->snapshot);
  EXPECT_EQ(feed_.loaded, (std::vector<uint64_t>{1, 2}));

  // Promotion: the canary's snapshot and withdrawn items become current without a load.
  const Snapshot* candidate = arm->snapshot.get();
  arm.reset();
  feed_.active = 2;
  feed_.canary = 0;
  feed_.share_bp = 0;
  ASSERT_TRUE(loop.RunOnce().ok());
  EXPECT_EQ(holder_.Get().get(), candidate);
  EXPECT_EQ(holder_.GetCanary(), nullptr);
  EXPECT_EQ(holder_.GetWithdrawn()->generation(), 2u);
  EXPECT_TRUE(holder_.GetWithdrawn()->Contains("tool-9"));
  EXPECT_FALSE(holder_.GetWithdrawn()->Contains("tool-1"));
  EXPECT_TRUE(holder_.GetWithdrawn()->BuiltFor(2));
  EXPECT_EQ(feed_.loaded, (std::vector<uint64_t>{1, 2}));
  EXPECT_EQ(loop.loads(), 3u);  // a promotion is counted, not built
  EXPECT_EQ(swapped_, (std::vector<uint64_t>{1, 2}));

  // A canary of the serving version is served from its snapshot, not loaded again.
  feed_.canary = 2;
  feed_.share_bp = 100;
  ASSERT_TRUE(loop.RunOnce().ok());
  ASSERT_NE(holder_.GetCanary(), nullptr);
  EXPECT_EQ(holder_.GetCanary()->snapshot, holder_.Get());
  EXPECT_EQ(feed_.loaded, (std::vector<uint64_t>{1, 2}));

  // A canary that fails to load is counted once and not served.
  feed_.canary = 3;
  feed_.broken.insert(3);
  Status s = loop.RunOnce();
  EXPECT_TRUE(s.IsCorruption()) << s.ToString();
  EXPECT_EQ(holder_.GetCanary()->snapshot->version(), 2u);  // the earlier arm stays
  ASSERT_TRUE(loop.RunOnce().ok());
  EXPECT_EQ(feed_.loaded, (std::vector<uint64_t>{1, 2, 3}));
  EXPECT_EQ(failed_, (std::vector<uint64_t>{3}));
  EXPECT_EQ(loop.failed_loads(), 1u);

  // Ended: nothing but the active version is served.
  feed_.canary = 0;
  ASSERT_TRUE(loop.RunOnce().ok());
  EXPECT_EQ(holder_.GetCanary(), nullptr);
  EXPECT_EQ(holder_.Get()->version(), 2u);
}

}  // namespace
}  // namespace plumb::server
