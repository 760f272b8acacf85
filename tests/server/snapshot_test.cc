// Snapshots: id maps, validation on build, loading from a store, and the catch-up loop that
// skips bad versions while the old one keeps serving.
#include "server/snapshot.h"

#include <gtest/gtest.h>

#include <cmath>
#include <filesystem>
#include <fstream>
#include <limits>
#include <thread>

#include "server/catch_up_loop.h"
#include "server/id_map.h"
#include "server/serving_metrics.h"
#include "store/keys.h"
#include "store/raw_records.h"
#include "tests/server/test_model.h"

namespace plumb::server {
namespace {

using testing::CommitModel;
using testing::RandomModel;
using testing::ScratchDir;
using testing::TestModel;
using testing::ToParts;

TEST(IdMapTest, FindsEveryIdAndNothingElse) {
  std::vector<std::string> ids;
  for (int i = 0; i < 5000; ++i) ids.push_back("tool-" + std::to_string(i * 7919 % 100003));
  IdMap map;
  ASSERT_TRUE(IdMap::Build(ids, &map).ok());
  ASSERT_EQ(map.size(), 5000u);
  for (uint32_t i = 0; i < ids.size(); ++i) {
    ASSERT_EQ(map.Find(ids[i]), std::optional<uint32_t>(i));
    ASSERT_EQ(map.id(i), ids[i]);
  }
  EXPECT_FALSE(map.Find("tool-").has_value());
  EXPECT_FALSE(map.Find("tool-100004").has_value());
  EXPECT_FALSE(map.Find("").has_value());
  IdMap empty;
  EXPECT_FALSE(empty.Find("tool-1").has_value());
}

TEST(IdMapTest, RejectsDuplicatesAndEmptyIds) {
  IdMap map;
  Status s = IdMap::Build({"drill", "saw", "drill"}, &map);
  EXPECT_TRUE(s.IsCorruption());
  EXPECT_NE(s.message().find("'drill' appears at indexes 0 and 2"), std::string::npos)
      << s.message();
  EXPECT_TRUE(IdMap::Build({"drill", ""}, &map).IsCorruption());
  EXPECT_EQ(map.size(), 0u);  // unchanged on error
}

TEST(SnapshotTest, BuildKeepsEverythingAndDerivesNormsAndDegreeOrder) {
  TestModel m = RandomModel(7, 40, 5, 6, 2, false);
  m.degrees[13] = 100;
  m.degrees[2] = 100;
  auto snap = testing::BuildSnapshot(m, 42);
  ASSERT_NE(snap, nullptr);
  EXPECT_EQ(snap->version(), 42u);
  EXPECT_EQ(snap->num_items(), 40u);
  EXPECT_EQ(snap->num_users(), 7u);
  EXPECT_EQ(snap->dim(), 5u);
  for (uint32_t u = 0; u < 7; ++u) {
    EXPECT_EQ(snap->FindUser(m.user_ids[u]), std::optional<uint32_t>(u));
    auto seen = snap->seen_items(u);
    EXPECT_EQ(std::vector<uint32_t>(seen.begin(), seen.end()), m.seen[u]);
    for (uint32_t k = 0; k < 5; ++k) EXPECT_EQ(snap->user_vector(u)[k], m.user(u)[k]);
  }
  for (uint32_t i = 0; i < 40; ++i) {
    double n2 = 0;
    for (float v : m.item(i)) n2 += double{v} * v;
    EXPECT_NEAR(snap->item_norms()[i], std::sqrt(n2), 1e-5);
  }
  // Degree order: the two items of degree 100, smaller index first.
  EXPECT_EQ(snap->items_by_degree()[0], 2u);
  EXPECT_EQ(snap->items_by_degree()[1], 13u);
  for (size_t r = 1; r < 40; ++r) {
    EXPECT_GE(snap->item_degrees()[snap->items_by_degree()[r - 1]],
              snap->item_degrees()[snap->items_by_degree()[r]]);
  }
  // The 64-byte alignment the scan relies on.
  EXPECT_EQ(reinterpret_cast<uintptr_t>(snap->items().data) % 64, 0u);
}

TEST(SnapshotTest, BuildRejectsInconsistentParts) {
  const TestModel m = RandomModel(4, 20, 3, 2, 2, false);
  std::shared_ptr<const Snapshot> snap;

  SnapshotParts p = ToParts(m, 5);
  p.items.mutable_row(6)[1] = std::numeric_limits<float>::quiet_NaN();
  Status s = Snapshot::Build(std::move(p), &snap);
  EXPECT_TRUE(s.IsCorruption());
  EXPECT_NE(s.message().find("item matrix has a non-finite value at row 6, column 1"),
            std::string::npos)
      << s.message();

  p = ToParts(m, 5);
  p.users.mutable_row(3)[2] = std::numeric_limits<float>::infinity();
  s = Snapshot::Build(std::move(p), &snap);
  EXPECT_NE(s.message().find("user matrix has a non-finite value at row 3"), std::string::npos);

  p = ToParts(m, 5);
  p.users = ItemMatrix(4, 4);  // dim 4 beside items of dim 3
  EXPECT_TRUE(Snapshot::Build(std::move(p), &snap).IsCorruption());

  p = ToParts(m, 5);
  p.item_ids.pop_back();
  EXPECT_TRUE(Snapshot::Build(std::move(p), &snap).IsCorruption());

  p = ToParts(m, 5);
  p.item_degrees.pop_back();
  EXPECT_TRUE(Snapshot::Build(std::move(p), &snap).IsCorruption());

  p = ToParts(m, 5);
  p.seen_items[0] = 20;  // beyond the catalogue
  EXPECT_TRUE(Snapshot::Build(std::move(p), &snap).IsCorruption());

  p = ToParts(m, 5);
  std::swap(p.seen_items[0], p.seen_items[1]);  // not ascending
  EXPECT_TRUE(Snapshot::Build(std::move(p), &snap).IsCorruption());

  p = ToParts(m, 5);
  p.user_ids[1] = p.user_ids[0];
  EXPECT_TRUE(Snapshot::Build(std::move(p), &snap).IsCorruption());

  EXPECT_EQ(snap, nullptr);  // never written on error
}

class StoreBackedTest : public ::testing::Test {
 protected:
  void SetUp() override {
    store::StoreOptions options;
    options.sync = false;
    options.rows_per_block = 64;  // several blocks per matrix
    ASSERT_TRUE(store::Store::OpenPrimary(dir_.Sub("db"), options, &primary_).ok());
  }
  void OpenSecondary() {
    Status s = store::Store::OpenSecondary(dir_.Sub("db"), dir_.Sub("scratch"), &secondary_);
    ASSERT_TRUE(s.ok()) << s.ToString();
  }
  uint64_t Commit(const TestModel& m, bool activate = true) {
    uint64_t v = 0;
    Status s = CommitModel(primary_.get(), m, activate, &v);
    EXPECT_TRUE(s.ok()) << s.ToString();
    return v;
  }

  ScratchDir dir_;
  std::unique_ptr<store::Store> primary_;
  std::unique_ptr<store::Store> secondary_;
};

TEST_F(StoreBackedTest, LoadSnapshotReadsTheVersionAsCommitted) {
  const TestModel m = RandomModel(30, 300, 8, 5, 4, false);
  const uint64_t v = Commit(m);
  // The dictionary grows after the version: the snapshot must still cover only its rows.
  store::StateChange more;
  more.new_items.emplace_back(300, "tool-added-later");
  more.new_users.emplace_back(30, "member-added-later");
  more.new_interactions.emplace_back(30, 300);
  more.new_interactions.emplace_back(2, 300);
  ASSERT_TRUE(primary_->Commit(more).ok());
  OpenSecondary();

  std::shared_ptr<const Snapshot> snap;
  Status s = LoadSnapshot(*secondary_, v, &snap);
  ASSERT_TRUE(s.ok()) << s.ToString();
  EXPECT_EQ(snap->version(), v);
  ASSERT_EQ(snap->num_items(), 300u);
  ASSERT_EQ(snap->num_users(), 30u);
  EXPECT_FALSE(snap->FindItem("tool-added-later").has_value());
  EXPECT_FALSE(snap->FindUser("member-added-later").has_value());
  for (uint32_t i = 0; i < 300; ++i) {
    ASSERT_EQ(snap->item_id(i), m.item_ids[i]);
    for (uint32_t k = 0; k < 8; ++k) ASSERT_EQ(snap->item_vector(i)[k], m.item(i)[k]);
    ASSERT_EQ(snap->item_degrees()[i], m.degrees[i]);
  }
  for (uint32_t u = 0; u < 30; ++u) {
    for (uint32_t k = 0; k < 8; ++k) ASSERT_EQ(snap->user_vector(u)[k], m.user(u)[k]);
    auto seen = snap->seen_items(u);
    ASSERT_EQ(std::vector<uint32_t>(seen.begin(), seen.end()), m.seen[u]);
  }
  EXPECT_EQ(LoadSnapshot(*secondary_, v + 100, &snap).code(), Status::Code::kNotFound);
}

TEST_F(StoreBackedTest, CatchUpLoopSkipsABadVersionAndKeepsServingTheOldOne) {
  const TestModel good = RandomModel(10, 100, 4, 3, 4, false);
  const uint64_t v1 = Commit(good);
  OpenSecondary();
  SnapshotHolder holder;
  std::vector<uint64_t> swapped, failed;
  CatchUpOptions options;
  options.on_swap = [&](const Snapshot& s, double) { swapped.push_back(s.version()); };
  options.on_load_failure = [&](uint64_t v, const Status&) { failed.push_back(v); };
  CatchUpLoop loop(secondary_.get(), &holder, options);
  ASSERT_TRUE(loop.RunOnce().ok());
  ASSERT_NE(holder.Get(), nullptr);
  EXPECT_EQ(holder.Get()->version(), v1);
  EXPECT_TRUE(loop.RunOnce().ok());  // nothing new: no reload
  EXPECT_EQ(loop.loads(), 1u);

  // A trainer bug: a NaN in the item matrix. The store accepts it; the server must not.
  TestModel nan_model = good;
  nan_model.items[17] = std::numeric_limits<float>::quiet_NaN();
  const uint64_t v2 = Commit(nan_model);
  Status s = loop.RunOnce();
  EXPECT_TRUE(s.IsCorruption()) << s.ToString();
  EXPECT_EQ(holder.Get()->version(), v1);
  EXPECT_TRUE(loop.RunOnce().ok());  // the same bad version is not retried every interval
  EXPECT_EQ(loop.failed_loads(), 1u);
  EXPECT_EQ(loop.loads(), 2u);

  // The next good version is picked up.
  const uint64_t v3 = Commit(good);
  ASSERT_TRUE(loop.RunOnce().ok());
  EXPECT_EQ(holder.Get()->version(), v3);
  EXPECT_EQ(swapped, (std::vector<uint64_t>{v1, v3}));
  EXPECT_EQ(failed, (std::vector<uint64_t>{v2}));
  EXPECT_EQ(loop.swaps(), 2u);
}

// A table file damaged while the server runs: the follower's catch-up would step around it
// and stay at the older state in silence; the loop's file check reports it, the metric
// shows it, and the loaded snapshot keeps serving.
TEST_F(StoreBackedTest, TheLoopReportsTableFilesDamagedWhileItRuns) {
  const TestModel good = RandomModel(10, 100, 4, 3, 4, false);
  const uint64_t v1 = Commit(good);
  OpenSecondary();
  SnapshotHolder holder;
  CatchUpOptions options;
  options.file_check_interval = std::chrono::milliseconds(0);  // every round
  CatchUpLoop loop(secondary_.get(), &holder, options);
  ServingMetrics metrics(&holder, &loop, nullptr);
  auto damaged_gauge = [&] {
    for (const auto& f : metrics.Collect()) {
      if (f.name == "plumb_store_damaged") return f.metric.at(0).gauge.value;
    }
    return -1.0;
  };
  ASSERT_TRUE(loop.RunOnce().ok());
  EXPECT_FALSE(loop.store_damaged());
  EXPECT_EQ(damaged_gauge(), 0.0);

  Commit(good);
  primary_.reset();  // flushes the new version and meta into new table files
  std::vector<std::string> tables;
  ASSERT_TRUE(store::testing::ListTableFiles(dir_.Sub("db"), "meta", &tables).ok());
  ASSERT_FALSE(tables.empty());
  std::filesystem::resize_file(tables.front(), std::filesystem::file_size(tables.front()) / 2);
  Status s = loop.RunOnce();
  EXPECT_TRUE(s.IsCorruption()) << s.ToString();
  EXPECT_NE(s.message().find(std::filesystem::path(tables.front()).filename().string()),
            std::string::npos)
      << s.ToString();
  EXPECT_TRUE(loop.store_damaged());
  EXPECT_EQ(damaged_gauge(), 1.0);
  ASSERT_NE(holder.Get(), nullptr);
  EXPECT_EQ(holder.Get()->version(), v1);
}

// A version whose table block fails its checksum is not swapped in: LoadSnapshot reads
// every block of the version with RocksDB's checksum verification, and the old snapshot
// keeps serving.
TEST_F(StoreBackedTest, AVersionWithABlockFailingItsChecksumIsNotSwappedIn) {
  const TestModel good = RandomModel(10, 300, 4, 3, 4, false);
  const uint64_t v1 = Commit(good);
  primary_.reset();  // version 1 in table files of its own
  store::StoreOptions options;
  options.sync = false;
  options.rows_per_block = 64;
  ASSERT_TRUE(store::Store::OpenPrimary(dir_.Sub("db"), options, &primary_).ok());
  OpenSecondary();
  SnapshotHolder holder;
  CatchUpLoop loop(secondary_.get(), &holder, CatchUpOptions{});
  ASSERT_TRUE(loop.RunOnce().ok());
  ASSERT_EQ(holder.Get()->version(), v1);

  const uint64_t v2 = Commit(RandomModel(10, 300, 4, 3, 5, false));
  primary_.reset();  // version 2's blocks now in the newest models table file
  std::vector<std::string> tables;
  ASSERT_TRUE(store::testing::ListTableFiles(dir_.Sub("db"), "models", &tables).ok());
  ASSERT_FALSE(tables.empty());
  {
    // Its first table block holds version 2's first item rows (keys sort 'b' < 'd' < 'm').
    std::fstream f(tables.front(), std::ios::in | std::ios::out | std::ios::binary);
    char c = 0;
    f.seekg(100);
    f.get(c);
    f.seekp(100);
    f.put(static_cast<char>(c ^ 0x5a));
  }
  Status s = loop.RunOnce();
  EXPECT_TRUE(s.IsCorruption()) << s.ToString();
  EXPECT_NE(s.message().find("checksum"), std::string::npos) << s.ToString();
  EXPECT_EQ(holder.Get()->version(), v1);
  EXPECT_EQ(loop.failed_loads(), 1u);
  uint64_t active = 0;
  ASSERT_TRUE(secondary_->GetActiveVersion(&active).ok());
  EXPECT_EQ(active, v2);  // the store says 2; the server stays with 1
}

// Damage the store API cannot produce (a missing block, a block of the wrong size) is made
// through raw records of the closed primary after the version was activated. Each damaged
// version is then met by a freshly opened follower, while the holder keeps serving v1.
TEST_F(StoreBackedTest, VersionsWithMissingOrWrongSizedBlocksAreSkipped) {
  const TestModel good = RandomModel(10, 300, 4, 3, 4, false);
  const uint64_t v1 = Commit(good);
  OpenSecondary();
  SnapshotHolder holder;
  {
    CatchUpLoop loop(secondary_.get(), &holder, CatchUpOptions{});
    ASSERT_TRUE(loop.RunOnce().ok());
  }
  ASSERT_EQ(holder.Get()->version(), v1);

  struct Damage {
    store::MatrixKind kind;
    bool remove;  // else: overwrite with 12 bytes
    const char* expect;
  };
  for (const Damage& d : {Damage{store::MatrixKind::kItems, true, "block"},
                          Damage{store::MatrixKind::kUsers, false, "12 bytes"}}) {
    if (!primary_) {
      store::StoreOptions options;
      options.sync = false;
      options.rows_per_block = 64;
      ASSERT_TRUE(store::Store::OpenPrimary(dir_.Sub("db"), options, &primary_).ok());
    }
    const uint64_t v = Commit(good);
    primary_.reset();
    secondary_.reset();
    // Items span five blocks of 64 rows; the ten users fit in block 0.
    const std::string key =
        store::keys::BlockKey(v, d.kind, d.kind == store::MatrixKind::kItems ? 1 : 0);
    Status damage =
        d.remove ? store::testing::DeleteRawRecord(dir_.Sub("db"), store::keys::kModelsFamily, key)
                 : store::testing::PutRawRecord(dir_.Sub("db"), store::keys::kModelsFamily, key,
                                                std::string(12, '\0'));
    ASSERT_TRUE(damage.ok()) << damage.ToString();
    OpenSecondary();
    CatchUpLoop loop(secondary_.get(), &holder, CatchUpOptions{});
    Status s = loop.RunOnce();
    EXPECT_TRUE(s.IsCorruption()) << s.ToString();
    EXPECT_NE(s.message().find(d.expect), std::string::npos) << s.message();
    EXPECT_EQ(loop.failed_loads(), 1u);
    EXPECT_EQ(holder.Get()->version(), v1);
  }
}

TEST_F(StoreBackedTest, TheLoopThreadPicksUpANewVersionAndOldSnapshotsStayValid) {
  const TestModel m = RandomModel(10, 100, 4, 3, 4, false);
  Commit(m);
  OpenSecondary();
  SnapshotHolder holder;
  CatchUpOptions options;
  options.interval = std::chrono::milliseconds(10);
  CatchUpLoop loop(secondary_.get(), &holder, options);
  loop.Start();
  auto wait_for = [&](uint64_t v) {
    for (int i = 0; i < 500; ++i) {
      auto snap = holder.Get();
      if (snap != nullptr && snap->version() == v) return true;
      std::this_thread::sleep_for(std::chrono::milliseconds(10));
    }
    return false;
  };
  ASSERT_TRUE(wait_for(1));
  std::shared_ptr<const Snapshot> held = holder.Get();  // an "in-flight request"
  const uint64_t v2 = Commit(RandomModel(10, 120, 4, 3, 5, false));
  ASSERT_TRUE(wait_for(v2));
  EXPECT_EQ(holder.Get()->num_items(), 120u);
  // The request's snapshot is untouched by the swap.
  EXPECT_EQ(held->version(), 1u);
  EXPECT_EQ(held->num_items(), 100u);
  EXPECT_EQ(held->item_vector(99)[3], m.item(99)[3]);
  loop.Stop();
  EXPECT_EQ(loop.swaps(), 2u);
}

}  // namespace
}  // namespace plumb::server
