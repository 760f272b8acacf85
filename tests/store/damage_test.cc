// Damaged files, not damaged records: table files missing, truncated or with a flipped byte,
// CURRENT and the write-ahead log gone. The store must say so, naming the file, and never
// show older data as current or create a new store over the old one's files.
#include <filesystem>
#include <fstream>

#include "store/keys.h"
#include "store/raw_records.h"
#include "tests/store/store_fixture.h"

namespace plumb::store {
namespace {

namespace fs = std::filesystem;
using testing::StoreFixture;

bool Mentions(const Status& s, const std::string& text) {
  return s.message().find(text) != std::string::npos;
}

size_t CountFiles(const std::string& dir, const std::string& ext) {
  size_t n = 0;
  for (const auto& e : fs::directory_iterator(dir)) n += e.path().extension() == ext;
  return n;
}

void FlipByte(const std::string& path, uint64_t offset) {
  std::fstream f(path, std::ios::in | std::ios::out | std::ios::binary);
  ASSERT_TRUE(f.good()) << path;
  f.seekg(static_cast<std::streamoff>(offset));
  char c = 0;
  f.get(c);
  f.seekp(static_cast<std::streamoff>(offset));
  f.put(static_cast<char>(c ^ 0x5a));
}

class DamageTest : public StoreFixture {
 protected:
  // Two versions, each published by its own opening, so that each lives in its own table
  // files (a store flushes when it closes): version 1 in the older files, version 2 and the
  // meta value naming it active in the newer ones.
  void SetUp() override {
    StoreFixture::SetUp();
    ASSERT_NO_FATAL_FAILURE(OpenWithFirstVersion());
    Reopen();
    AppendResult r;
    ASSERT_TRUE(store_->AppendEvents(Loans(5, 5), &r).ok());
    ASSERT_EQ(Publish(3, 2.0f, true), 2u);
    Close();
  }

  std::string NewestTable(const char* family) {
    std::vector<std::string> paths;
    Status s = testing::ListTableFiles(dir_, family, &paths);
    EXPECT_TRUE(s.ok()) << s.ToString();
    EXPECT_GE(paths.size(), 2u) << family;
    return paths.empty() ? std::string() : paths.front();
  }

  Status OpenFollower(std::unique_ptr<Store>* out) {
    return Store::OpenSecondary(dir_, scratch_.Sub("follower"), out);
  }

  // A healthy store opens as a follower with version 2 active: the baseline of every test.
  void ExpectHealthy() {
    std::unique_ptr<Store> follower;
    Status s = OpenFollower(&follower);
    ASSERT_TRUE(s.ok()) << s.ToString();
    uint64_t active = 0;
    ASSERT_TRUE(follower->GetActiveVersion(&active).ok());
    EXPECT_EQ(active, 2u);
  }
};

TEST_F(DamageTest, HealthyStorePassesEveryCheck) {
  ExpectHealthy();
  EXPECT_TRUE(Store::CheckFiles(dir_, scratch_.Sub("check")).ok());
  Reopen();
  VerifyReport report;
  ASSERT_TRUE(store_->Verify(&report).ok());
  EXPECT_TRUE(report.problems.empty()) << report.problems.front();
  EXPECT_EQ(report.events, 10u);
  EXPECT_EQ(report.versions, 2u);
  EXPECT_GT(report.table_files, 0u);
}

// Before the check, a follower opened this store, showed version 1 as active and served it.
TEST_F(DamageTest, MissingMetaTableFileIsReportedNotStepped) {
  const std::string victim = NewestTable(keys::kMetaFamily);
  fs::remove(victim);
  std::unique_ptr<Store> follower;
  Status s = OpenFollower(&follower);
  EXPECT_TRUE(s.IsCorruption()) << s.ToString();
  EXPECT_TRUE(Mentions(s, fs::path(victim).stem().string())) << s.ToString();
  EXPECT_TRUE(Mentions(s, "plumb repair")) << s.ToString();
  EXPECT_EQ(follower, nullptr);
  // The primary refuses too (RocksDB's own paranoid open), and says where to go.
  std::unique_ptr<Store> primary;
  s = Store::OpenPrimary(dir_, options_, &primary);
  EXPECT_TRUE(s.IsCorruption()) << s.ToString();
}

TEST_F(DamageTest, TruncatedMetaTableFile) {
  const std::string victim = NewestTable(keys::kMetaFamily);
  fs::resize_file(victim, fs::file_size(victim) / 2);
  std::unique_ptr<Store> follower;
  Status s = OpenFollower(&follower);
  EXPECT_TRUE(s.IsCorruption()) << s.ToString();
  EXPECT_TRUE(Mentions(s, fs::path(victim).filename().string())) << s.ToString();
}

// Before the check: the follower opened and said "version 2 is not stored".
TEST_F(DamageTest, TruncatedModelsTableFile) {
  const std::string victim = NewestTable(keys::kModelsFamily);
  fs::resize_file(victim, fs::file_size(victim) - 10);
  std::unique_ptr<Store> follower;
  Status s = OpenFollower(&follower);
  EXPECT_TRUE(s.IsCorruption()) << s.ToString();
  EXPECT_TRUE(Mentions(s, fs::path(victim).filename().string())) << s.ToString();
}

// Before the guard: RocksDB created a new, empty store and deleted every table file.
TEST_F(DamageTest, NoNewStoreOverFilesWithoutCurrent) {
  const size_t tables = CountFiles(dir_, ".sst");
  ASSERT_GT(tables, 0u);
  fs::remove(fs::path(dir_) / "CURRENT");
  for (const auto& e : fs::directory_iterator(dir_)) {
    if (e.path().extension() == ".log") fs::remove(e.path());
  }
  std::unique_ptr<Store> primary;
  StoreOptions options = options_;
  options.create_if_missing = true;
  Status s = Store::OpenPrimary(dir_, options, &primary);
  EXPECT_TRUE(s.IsCorruption()) << s.ToString();
  EXPECT_TRUE(Mentions(s, "no CURRENT file")) << s.ToString();
  EXPECT_TRUE(Mentions(s, "plumb repair")) << s.ToString();
  EXPECT_EQ(CountFiles(dir_, ".sst"), tables);  // nothing deleted

  std::unique_ptr<Store> follower;
  s = OpenFollower(&follower);
  EXPECT_TRUE(s.IsCorruption()) << s.ToString();
}

TEST_F(DamageTest, AnEmptyOrNewDirectoryStillGetsAStore) {
  std::unique_ptr<Store> fresh;
  fs::create_directories(scratch_.Sub("empty"));
  EXPECT_TRUE(Store::OpenPrimary(scratch_.Sub("empty"), options_, &fresh).ok());
  fresh.reset();
  EXPECT_TRUE(Store::OpenPrimary(scratch_.Sub("new"), options_, &fresh).ok());
  fresh.reset();
  EXPECT_TRUE(Store::CheckFiles(scratch_.Sub("nothing-here"), scratch_.Sub("c")).IsNotFound());
}

TEST_F(DamageTest, VerifyNamesTheDamagedBlockAndVersion) {
  // A version 3 of 2000 items: its blocks span several 4 KB table blocks, so that damage
  // in the middle of its table file hits embedding rows, not its manifest.
  Reopen();
  AddIds(0, 1990);
  ASSERT_EQ(Publish(3, 3.0f, true), 3u);
  Close();
  const std::string victim = NewestTable(keys::kModelsFamily);
  FlipByte(victim, fs::file_size(victim) / 3);
  // The footer and index are intact: the file check passes, block checksums do not.
  std::unique_ptr<Store> follower;
  Status s = OpenFollower(&follower);
  ASSERT_TRUE(s.ok()) << s.ToString();
  VerifyReport report;
  ASSERT_TRUE(follower->Verify(&report).ok());
  ASSERT_FALSE(report.problems.empty());
  bool names_file = false;
  for (const std::string& p : report.problems) {
    names_file = names_file || (Mentions(Status::Corruption(p), fs::path(victim).filename()) &&
                                Mentions(Status::Corruption(p), "models"));
  }
  EXPECT_TRUE(names_file) << report.problems.front();
  EXPECT_EQ(report.damaged_versions, std::vector<uint64_t>{3});
  EXPECT_EQ(report.versions, 2u);  // versions 1 and 2 read in full
  EXPECT_EQ(report.events, 10u);
}

TEST_F(DamageTest, VerifyStepsOverADamagedEventBlock) {
  // 3000 events in one table of many 4 KB blocks; damage one block in the middle.
  Reopen();
  AppendResult r;
  std::vector<EventInput> many = Loans(3000, 100, /*with_ids=*/false);
  ASSERT_TRUE(store_->AppendEvents(many, &r).ok());
  Close();
  const std::string victim = NewestTable(keys::kEventsFamily);
  FlipByte(victim, fs::file_size(victim) / 3);
  std::unique_ptr<Store> follower;
  ASSERT_TRUE(OpenFollower(&follower).ok());
  VerifyReport report;
  ASSERT_TRUE(follower->Verify(&report).ok());
  ASSERT_EQ(report.problems.size(), 2u) << report.problems.front();  // the file, the range
  EXPECT_TRUE(Mentions(Status::Corruption(report.problems[1]), "are unreadable"))
      << report.problems[1];
  // Every event outside the damaged block was still read: one 4 KB block holds well under
  // 200 of these events, so at least 3010 - 200 were decoded.
  EXPECT_GT(report.events, 2810u);
  EXPECT_LT(report.events, 3010u);
}

}  // namespace
}  // namespace plumb::store

// ---- Repair ------------------------------------------------------------------------------

namespace plumb::store {
namespace {

class RepairTest : public DamageTest {
 protected:
  RepairReport Repair() {
    RepairReport report;
    Status s = Store::Repair(dir_, options_, &report);
    EXPECT_TRUE(s.ok()) << s.ToString();
    for (const std::string& p : report.remaining) ADD_FAILURE() << "still wrong: " << p;
    return report;
  }
  void ExpectEvents(uint64_t n) {
    std::vector<Event> events;
    ASSERT_TRUE(store_->ReadEvents(0, 100000, &events).ok());
    EXPECT_EQ(events.size(), n);
  }
};

TEST_F(RepairTest, RebuildsAStoreThatLostCurrentAndItsLog) {
  fs::remove(fs::path(dir_) / "CURRENT");
  for (const auto& e : fs::directory_iterator(dir_)) {
    if (e.path().extension() == ".log") fs::remove(e.path());
  }
  RepairReport report = Repair();
  EXPECT_TRUE(report.rebuilt);
  EXPECT_TRUE(report.set_aside.empty());
  EXPECT_TRUE(report.dropped_versions.empty());
  EXPECT_EQ(report.active_after, 2u);
  ExpectHealthy();
  Reopen();
  ExpectEvents(10);
  std::vector<VersionManifest> versions;
  ASSERT_TRUE(store_->ListVersions(&versions).ok());
  EXPECT_EQ(versions.size(), 2u);
}

// The newest version has a damaged block: the trainer's warm start reads it and fails, and
// the table file holding it cannot be compacted either. Repair sets the file aside, copies
// back every readable record (here the whole of version 3, which shares the file), drops
// version 4 and activates version 3.
TEST_F(RepairTest, DropsTheDamagedVersionAndKeepsItsNeighbours) {
  Reopen();
  AddIds(0, 1990);
  ASSERT_EQ(Publish(3, 3.0f, false), 3u);
  ASSERT_EQ(Publish(3, 4.0f, true), 4u);
  Close();
  const std::string victim = NewestTable(keys::kModelsFamily);
  FlipByte(victim, 36000);  // among version 4's item rows (2000 x 3 floats per version)
  Reopen();
  VerifyReport before;
  ASSERT_TRUE(store_->Verify(&before).ok());
  ASSERT_EQ(before.damaged_versions, std::vector<uint64_t>{4});
  Close();

  RepairReport report = Repair();
  EXPECT_TRUE(report.rebuilt);
  ASSERT_EQ(report.set_aside.size(), 1u);
  EXPECT_EQ(report.set_aside[0].family, keys::kModelsFamily);
  EXPECT_EQ(report.set_aside[0].unreadable_ranges, 1u);
  EXPECT_GT(report.salvaged_records, 0u);
  EXPECT_EQ(report.dropped_versions, std::vector<uint64_t>{4});
  EXPECT_EQ(report.active_before, 4u);
  EXPECT_EQ(report.active_after, 3u);

  Reopen();
  ExpectEvents(10);
  auto expected = testing::MakeVersion(6, 2000, 3, 3.0f);
  std::vector<float> items(2000 * 3);
  ASSERT_TRUE(store_->ReadMatrix(3, MatrixKind::kItems, items).ok());
  EXPECT_EQ(items, expected->items);
  // The next version gets a new number, never 4 again.
  EXPECT_EQ(Publish(3, 5.0f, false), 5u);
}

TEST_F(RepairTest, MissingMetaTableFileFallsBackToTheOlderMeta) {
  fs::remove(NewestTable(keys::kMetaFamily));
  RepairReport report = Repair();
  EXPECT_TRUE(report.rebuilt);
  EXPECT_TRUE(report.dropped_versions.empty());
  EXPECT_EQ(report.active_after, 1u);  // the newer meta value (2) went with the file
  Reopen();
  ExpectEvents(10);
}

TEST_F(RepairTest, RefusesWhileTheStoreIsOpen) {
  Reopen();
  RepairReport report;
  Status s = Store::Repair(dir_, options_, &report);
  EXPECT_EQ(s.code(), Status::Code::kUnavailable) << s.ToString();
}

TEST_F(RepairTest, AHealthyStoreIsLeftAsItIs) {
  RepairReport report = Repair();
  EXPECT_FALSE(report.rebuilt);
  EXPECT_TRUE(report.dropped_versions.empty());
  EXPECT_EQ(report.active_after, 2u);
  EXPECT_EQ(report.degrees_rewritten, 0u);
}

}  // namespace
}  // namespace plumb::store

namespace plumb::store {
namespace {

// Damage that appears while a follower runs: its catch-up steps around a damaged table file
// as an opening would, so it stays at the older state without an error. RecheckFiles() is
// how a follower finds out.
TEST_F(DamageTest, AFollowerFindsDamageThatAppearsLater) {
  std::unique_ptr<Store> follower;
  ASSERT_TRUE(OpenFollower(&follower).ok());
  EXPECT_TRUE(follower->RecheckFiles().ok());
  Reopen();
  ASSERT_EQ(Publish(3, 3.0f, true), 3u);
  Close();  // flushes version 3 and the meta value naming it into new table files
  const std::string victim = NewestTable(keys::kMetaFamily);
  fs::resize_file(victim, fs::file_size(victim) - 7);
  EXPECT_TRUE(follower->CatchUp().ok());  // steps around the damage: no error
  uint64_t active = 0;
  ASSERT_TRUE(follower->GetActiveVersion(&active).ok());
  EXPECT_NE(active, 3u);  // what the follower sees: the older state, no error
  Status s = follower->RecheckFiles();
  EXPECT_TRUE(s.IsCorruption()) << s.ToString();
  EXPECT_TRUE(Mentions(s, fs::path(victim).filename().string())) << s.ToString();
}

}  // namespace
}  // namespace plumb::store
