// Versions: publish, read back exactly, list, prune, activate.
#include <chrono>
#include <cmath>
#include <cstring>

#include "store/keys.h"
#include "store/raw_records.h"
#include "tests/store/store_fixture.h"

namespace plumb::store {
namespace {

using testing::MakeVersion;
using testing::StoreFixture;

class VersionsTest : public StoreFixture {
 protected:
  void SetUp() override {
    StoreFixture::SetUp();
    StoreOptions options = testing::TestOptions();
    options.rows_per_block = 4;  // small blocks: every matrix below spans several
    options.keep_versions = 3;
    options.keep_versions_for_ms = 0;  // by count only, unless a test says otherwise
    Open(options);
    AddIds(10, 7);
  }

  uint64_t Active() {
    uint64_t v = 0;
    EXPECT_TRUE(store_->GetActiveVersion(&v).ok());
    return v;
  }
};

TEST_F(VersionsTest, PublishedVersionReadsBackByteForByte) {
  // 10 users and 7 items in blocks of 4 rows: the last block of each matrix is partial.
  auto v = MakeVersion(10, 7, 3, 1.0f);
  v->users[5] = -0.0f;
  v->users[6] = std::nanf("");  // the store keeps bytes; finiteness is the trainer's gate
  v->write.manifest.created_ms = 1'717'000'000'000;
  v->write.manifest.events_seen = 42;
  v->write.manifest.num_interactions = 40;
  v->write.manifest.validation_recall = std::nan("");
  v->write.manifest.validation_k = 20;
  v->write.manifest.gate = GateOutcome::kSkipped;
  v->write.manifest.gate_reason = "first version";
  v->write.manifest.figures = {{"loss", 0.6931}, {"arp_at_20", 12.5}};
  StateChange change;
  change.version = &v->write;
  uint64_t published = 0;
  ASSERT_TRUE(store_->Commit(change, &published).ok());
  EXPECT_EQ(published, 1u);
  EXPECT_EQ(Active(), 0u);  // not asked to activate

  Reopen();
  VersionManifest m;
  ASSERT_TRUE(store_->ReadManifest(1, &m).ok());
  EXPECT_EQ(m.version, 1u);
  EXPECT_EQ(m.created_ms, 1'717'000'000'000);
  EXPECT_EQ(m.objective, "cpr");
  EXPECT_EQ(m.events_seen, 42u);
  EXPECT_EQ(m.num_interactions, 40u);
  EXPECT_EQ(m.num_users, 10u);
  EXPECT_EQ(m.num_items, 7u);
  EXPECT_EQ(m.dim, 3u);
  EXPECT_TRUE(std::isnan(m.validation_recall));
  EXPECT_EQ(m.validation_k, 20u);
  EXPECT_EQ(m.gate, GateOutcome::kSkipped);
  EXPECT_EQ(m.gate_reason, "first version");
  EXPECT_EQ(m.figures, v->write.manifest.figures);

  std::vector<float> users(30), items(21);
  ASSERT_TRUE(store_->ReadMatrix(1, MatrixKind::kUsers, users).ok());
  ASSERT_TRUE(store_->ReadMatrix(1, MatrixKind::kItems, items).ok());
  EXPECT_EQ(std::memcmp(users.data(), v->users.data(), users.size() * sizeof(float)), 0);
  EXPECT_EQ(std::memcmp(items.data(), v->items.data(), items.size() * sizeof(float)), 0);
  std::vector<uint32_t> degrees;
  ASSERT_TRUE(store_->ReadVersionDegrees(1, &degrees).ok());
  EXPECT_EQ(degrees, v->degrees);

  // A destination of the wrong size is the caller's error, and nothing is written to it.
  std::vector<float> wrong(29, 7.0f);
  EXPECT_EQ(store_->ReadMatrix(1, MatrixKind::kUsers, wrong).code(),
            Status::Code::kInvalidArgument);
  EXPECT_EQ(wrong[0], 7.0f);
  EXPECT_TRUE(store_->ReadMatrix(2, MatrixKind::kUsers, users).IsNotFound());
  EXPECT_TRUE(store_->ReadManifest(2, &m).IsNotFound());
}

TEST_F(VersionsTest, VersionMayCoverFewerRowsThanTheDictionary) {
  auto v = MakeVersion(4, 0, 2, 3.0f);  // no items at all
  StateChange change;
  change.version = &v->write;
  uint64_t published = 0;
  ASSERT_TRUE(store_->Commit(change, &published).ok());
  std::vector<float> users(8), items;
  ASSERT_TRUE(store_->ReadMatrix(published, MatrixKind::kUsers, users).ok());
  EXPECT_EQ(users, v->users);
  ASSERT_TRUE(store_->ReadMatrix(published, MatrixKind::kItems, items).ok());
  ASSERT_TRUE(store_->Activate(published).ok());
}

TEST_F(VersionsTest, ListIsNewestFirst) {
  EXPECT_TRUE(Listed().empty());
  Publish(2, 1, false);
  Publish(2, 2, false);
  Publish(2, 3, false);
  EXPECT_EQ(Listed(), (std::vector<uint64_t>{3, 2, 1}));
}

TEST_F(VersionsTest, PruningKeepsTheNewestAndNeverTheActive) {
  ASSERT_EQ(Publish(2, 1, /*activate=*/true), 1u);
  for (int k = 2; k <= 6; ++k) Publish(2, static_cast<float>(k), false);
  // keep_versions = 3: versions 4..6, plus version 1 because it is active.
  EXPECT_EQ(Listed(), (std::vector<uint64_t>{6, 5, 4, 1}));
  EXPECT_EQ(Active(), 1u);
  VersionManifest m;
  EXPECT_TRUE(store_->ReadManifest(2, &m).IsNotFound());
  std::vector<float> users(20);
  EXPECT_TRUE(store_->ReadMatrix(3, MatrixKind::kUsers, users).IsNotFound());
  ASSERT_TRUE(store_->ReadMatrix(1, MatrixKind::kUsers, users).ok());
  EXPECT_EQ(users, testing::PatternMatrix(10, 2, 1.0f));

  // Once another version is active, the old one goes at the next publish.
  ASSERT_TRUE(store_->Activate(5).ok());
  EXPECT_EQ(Active(), 5u);
  Publish(2, 7, false);
  EXPECT_EQ(Listed(), (std::vector<uint64_t>{7, 6, 5}));

  // Pruning removed every block, not only the manifests.
  Close();
  for (uint64_t gone : {1, 2, 3, 4}) {
    std::string raw;
    EXPECT_TRUE(testing::GetRawRecord(dir_, keys::kModelsFamily,
                                      keys::BlockKey(gone, MatrixKind::kItems, 0), &raw)
                    .IsNotFound())
        << "version " << gone;
    EXPECT_TRUE(
        testing::GetRawRecord(dir_, keys::kModelsFamily, keys::VersionDegreesKey(gone, 0), &raw)
            .IsNotFound())
        << "version " << gone;
  }
  std::string raw;
  EXPECT_TRUE(testing::GetRawRecord(dir_, keys::kModelsFamily,
                                    keys::BlockKey(5, MatrixKind::kItems, 1), &raw)
                  .ok());

  // Numbers are never reused, even for pruned versions and after a reopen.
  Reopen();
  EXPECT_EQ(Publish(2, 8, false), 8u);
}

// Versions younger than keep_versions_for_ms stay whatever their rank; older ones beyond the
// newest keep_versions go. Ages are set through created_ms (a manifest may carry its own).
TEST_F(VersionsTest, PruningKeepsEveryVersionYoungerThanTheAgeRule) {
  StoreOptions options = testing::TestOptions();
  options.keep_versions = 2;
  options.keep_versions_for_ms = 3600 * 1000;  // one hour
  Open(options);
  const int64_t now = std::chrono::duration_cast<std::chrono::milliseconds>(
                          std::chrono::system_clock::now().time_since_epoch())
                          .count();
  auto publish_aged = [&](int64_t age_ms, float fill) {
    auto v = MakeVersion(10, 7, 2, fill);
    v->write.manifest.created_ms = now - age_ms;
    StateChange change;
    change.version = &v->write;
    uint64_t published = 0;
    EXPECT_TRUE(store_->Commit(change, &published).ok());
    return published;
  };
  const int64_t hour = 3600 * 1000;
  publish_aged(3 * hour, 1);  // 1: old
  publish_aged(2 * hour, 2);  // 2: old
  publish_aged(hour / 2, 3);  // 3: young
  publish_aged(hour / 4, 4);  // 4: young
  // Version 1 and 2 are beyond the newest two and older than an hour: gone; 3 stays by age.
  EXPECT_EQ(Listed(), (std::vector<uint64_t>{4, 3}));
  publish_aged(0, 5);
  publish_aged(0, 6);
  EXPECT_EQ(Listed(), (std::vector<uint64_t>{6, 5, 4, 3}));
}

// A pinned version survives any rule; unpinned, it goes at the next publish.
TEST_F(VersionsTest, PinnedVersionsAreNeverPruned) {
  ASSERT_EQ(Publish(2, 1, /*activate=*/true), 1u);
  const uint64_t pinned = Publish(2, 2, false);
  ASSERT_TRUE(store_->SetPinned(pinned, true).ok());
  ASSERT_TRUE(store_->SetPinned(pinned, true).ok());  // idempotent
  for (int k = 3; k <= 7; ++k) Publish(2, static_cast<float>(k), false);
  // keep_versions = 3 (by count only here): 5..7, the active 1 and the pinned 2.
  EXPECT_EQ(Listed(), (std::vector<uint64_t>{7, 6, 5, 2, 1}));
  VersionManifest m;
  ASSERT_TRUE(store_->ReadManifest(pinned, &m).ok());
  EXPECT_TRUE(m.pinned);
  ASSERT_TRUE(store_->ReadManifest(7, &m).ok());
  EXPECT_FALSE(m.pinned);
  std::vector<VersionManifest> listed;
  ASSERT_TRUE(store_->ListVersions(&listed).ok());
  EXPECT_TRUE(listed[3].pinned);
  EXPECT_FALSE(listed[4].pinned);

  // Pins survive a reopen; NotFound for a version that is not kept.
  Reopen();
  EXPECT_TRUE(store_->SetPinned(4, true).IsNotFound());
  ASSERT_TRUE(store_->SetPinned(pinned, false).ok());
  Publish(2, 8, false);
  EXPECT_EQ(Listed(), (std::vector<uint64_t>{8, 7, 6, 1}));
}

TEST_F(VersionsTest, ActivatePublishedAndActivateStored) {
  EXPECT_EQ(Active(), 0u);
  const uint64_t v1 = Publish(2, 1, true);
  EXPECT_EQ(Active(), v1);
  const uint64_t v2 = Publish(2, 2, false);
  EXPECT_EQ(Active(), v1);

  StateChange change;
  change.activate = v2;
  ASSERT_TRUE(store_->Commit(change).ok());
  EXPECT_EQ(Active(), v2);
  ASSERT_TRUE(store_->Activate(v1).ok());  // roll back
  Reopen();
  EXPECT_EQ(Active(), v1);

  EXPECT_TRUE(store_->Activate(99).IsNotFound());
  change.activate = 99;
  EXPECT_TRUE(store_->Commit(change).IsNotFound());
  EXPECT_EQ(Active(), v1);
}

// SkipVersionNumbers moves the numbering forward only, durably.
TEST_F(VersionsTest, SkipVersionNumbersMovesForwardOnly) {
  ASSERT_EQ(Publish(2, 1, true), 1u);
  uint64_t was = 0;
  ASSERT_TRUE(store_->SkipVersionNumbers(50, &was).ok());
  EXPECT_EQ(was, 2u);
  ASSERT_TRUE(store_->SkipVersionNumbers(10, &was).ok());  // never back
  EXPECT_EQ(was, 50u);
  Reopen();
  EXPECT_EQ(Publish(2, 2, false), 50u);
  EXPECT_EQ(Publish(2, 3, false), 51u);
  VerifyReport report;
  ASSERT_TRUE(store_->Verify(&report).ok());
  EXPECT_TRUE(report.problems.empty()) << report.problems.front();
}

TEST_F(VersionsTest, ExplicitVersionNumbersMustBeNew) {
  auto v = MakeVersion(10, 7, 2, 1.0f);
  v->write.manifest.version = 10;
  StateChange change;
  change.version = &v->write;
  uint64_t published = 0;
  ASSERT_TRUE(store_->Commit(change, &published).ok());
  EXPECT_EQ(published, 10u);
  // 10 again, or anything older, is refused; 0 means "the next one".
  EXPECT_EQ(store_->Commit(change, &published).code(), Status::Code::kInvalidArgument);
  EXPECT_EQ(published, 0u);
  v->write.manifest.version = 4;
  EXPECT_EQ(store_->Commit(change).code(), Status::Code::kInvalidArgument);
  v->write.manifest.version = 0;
  ASSERT_TRUE(store_->Commit(change, &published).ok());
  EXPECT_EQ(published, 11u);
}

TEST_F(VersionsTest, PublishTogetherWithTrainingState) {
  AppendResult r;
  ASSERT_TRUE(store_->AppendEvents(Loans(3, 0), &r).ok());
  auto v = MakeVersion(11, 7, 2, 1.0f);
  StateChange change;
  change.new_users = {{10, "member-new"}};
  change.new_interactions = {{10, 6}};
  change.item_degrees = {{6, 1}};
  change.cursor = 3;
  change.meta = {{"last_publish_reason", "interval"}};
  change.version = &v->write;
  change.activate_published = true;
  uint64_t published = 0;
  ASSERT_TRUE(store_->Commit(change, &published).ok());
  Reopen();
  EXPECT_EQ(Active(), published);
  uint64_t cursor = 0;
  ASSERT_TRUE(store_->GetCursor(&cursor).ok());
  EXPECT_EQ(cursor, 3u);
  std::vector<uint32_t> items;
  ASSERT_TRUE(store_->UserItems(10, &items).ok());
  EXPECT_EQ(items, (std::vector<uint32_t>{6}));
  std::string value;
  ASSERT_TRUE(store_->GetMeta("last_publish_reason", &value).ok());
  EXPECT_EQ(value, "interval");
}

}  // namespace
}  // namespace plumb::store
