// ForgetUser: erasure on request. Everything the store held of one user goes — events,
// de-duplication records, dictionary entry, interactions, their share of the degrees, their
// row in every kept version — and the bytes are gone from the store's files, while every
// other user's data stays exactly as it was.
#include <filesystem>
#include <fstream>
#include <iterator>
#include <set>

#include "store/keys.h"
#include "store/raw_records.h"
#include "tests/store/store_fixture.h"

namespace plumb::store {
namespace {

namespace fs = std::filesystem;
using testing::StoreFixture;

// Files under `dir` that hold `needle`: table files by their records (decompressed: the
// store compresses most families), every other file by its raw bytes (log, MANIFEST).
std::vector<std::string> FilesHolding(const std::string& dir, const std::string& needle) {
  std::set<std::string> out;
  for (const auto& e : fs::recursive_directory_iterator(dir)) {
    if (!e.is_regular_file() || e.path().extension() == ".sst") continue;
    std::ifstream in(e.path(), std::ios::binary);
    const std::string bytes((std::istreambuf_iterator<char>(in)), std::istreambuf_iterator<char>());
    if (bytes.find(needle) != std::string::npos) out.insert(e.path().filename().string());
  }
  uint64_t deletions = 0;
  Status s = testing::ForEachTableRecord(
      dir,
      [&](const std::string& file, std::string_view key, std::string_view value) {
        if (key.find(needle) != std::string_view::npos ||
            value.find(needle) != std::string_view::npos) {
          out.insert(file);
        }
      },
      &deletions);
  EXPECT_TRUE(s.ok()) << s.ToString();
  return {out.begin(), out.end()};
}

uint64_t Deletions(const std::string& dir) {
  uint64_t deletions = 0;
  EXPECT_TRUE(testing::ForEachTableRecord(
                  dir, [](const std::string&, std::string_view, std::string_view) {}, &deletions)
                  .ok());
  return deletions;
}

class ForgetTest : public StoreFixture {
 protected:
  void SetUp() override {
    StoreFixture::SetUp();
    StoreOptions options = testing::TestOptions();
    options.rows_per_block = 2;  // the user's row shares a block with another user's
    Open(options);
    // Loans(n, 0): event k is member-(k % 7) borrowing tool-(k % 11), event id loan-k.
    AppendResult r;
    ASSERT_TRUE(store_->AppendEvents(Loans(70, 0), &r).ok());
    StateChange change;
    for (uint32_t u = 0; u < 7; ++u)
      change.new_users.emplace_back(u, "member-" + std::to_string(u));
    for (uint32_t i = 0; i < 11; ++i) change.new_items.emplace_back(i, "tool-" + std::to_string(i));
    std::vector<uint32_t> degrees(11, 0);
    for (int k = 0; k < 70; ++k) {
      const auto pair = std::make_pair(uint32_t(k % 7), uint32_t(k % 11));
      if (std::find(change.new_interactions.begin(), change.new_interactions.end(), pair) ==
          change.new_interactions.end()) {
        change.new_interactions.push_back(pair);
        ++degrees[pair.second];
      }
    }
    for (uint32_t i = 0; i < 11; ++i) change.item_degrees.emplace_back(i, degrees[i]);
    change.cursor = 70;
    ASSERT_TRUE(store_->Commit(change).ok());
    ASSERT_EQ(Publish(3, 1.0f, true), 1u);
    ASSERT_EQ(Publish(3, 2.0f, false), 2u);
  }
};

TEST_F(ForgetTest, EverythingOfTheUserGoesAndNothingElse) {
  std::vector<float> before(7 * 3);
  ASSERT_TRUE(store_->ReadMatrix(1, MatrixKind::kUsers, before).ok());
  // The check can see the id in table files (closing flushes the log into them).
  Close();
  Reopen();
  const std::vector<std::string> holding = FilesHolding(dir_, "member-2");
  ASSERT_TRUE(std::any_of(holding.begin(), holding.end(),
                          [](const std::string& f) { return f.ends_with(".sst"); }));

  ForgetReport report;
  Status s = store_->ForgetUser("member-2", &report);
  ASSERT_TRUE(s.ok()) << s.ToString();
  EXPECT_EQ(report.events, 10u);  // k = 2, 9, 16, ..., 65
  EXPECT_TRUE(report.had_index);
  EXPECT_EQ(report.index, 2u);
  EXPECT_EQ(report.interactions, 10u);  // 10 distinct tools (k % 11 differs for each k)
  EXPECT_EQ(report.versions_changed, (std::vector<uint64_t>{1, 2}));

  std::vector<Event> events;
  ASSERT_TRUE(store_->ReadEvents(0, 1000, &events).ok());
  EXPECT_EQ(events.size(), 60u);
  for (const Event& e : events) EXPECT_NE(e.user_id, "member-2");
  uint32_t index = 0;
  EXPECT_TRUE(store_->LookupId(IdSpace::kUser, "member-2", &index).IsNotFound());
  std::vector<std::string> ids;
  ASSERT_TRUE(store_->LoadIds(IdSpace::kUser, 7, &ids).ok());  // still gap-free
  EXPECT_EQ(ids[2], std::string(kForgottenIdPrefix) + "2");
  EXPECT_EQ(ids[3], "member-3");
  std::vector<uint32_t> items;
  ASSERT_TRUE(store_->UserItems(2, &items).ok());
  EXPECT_TRUE(items.empty());
  ASSERT_TRUE(store_->UserItems(3, &items).ok());
  EXPECT_EQ(items.size(), 10u);

  // Degrees agree with the remaining interactions, and everything else verifies.
  VerifyReport verify;
  ASSERT_TRUE(store_->Verify(&verify).ok());
  for (const std::string& p : verify.problems) ADD_FAILURE() << p;

  // Row 2 is zero in both versions; rows 3 (same block) and the others are untouched.
  for (uint64_t v : {1u, 2u}) {
    std::vector<float> users(7 * 3);
    ASSERT_TRUE(store_->ReadMatrix(v, MatrixKind::kUsers, users).ok());
    const auto expected = testing::MakeVersion(7, 11, 3, v == 1 ? 1.0f : 2.0f);
    for (size_t k = 0; k < users.size(); ++k) {
      EXPECT_EQ(users[k], k / 3 == 2 ? 0.0f : expected->users[k]) << "version " << v << " " << k;
    }
  }

  // The erased event ids are forgotten too: the same id is a new event now.
  std::vector<EventInput> again = Loans(1, 2);  // loan-2, member-2
  AppendResult r;
  ASSERT_TRUE(store_->AppendEvents(again, &r).ok());
  EXPECT_EQ(r.appended, 1u);
  ForgetReport second;
  ASSERT_TRUE(store_->ForgetUser("member-2", &second).ok());
  EXPECT_EQ(second.events, 1u);
  EXPECT_FALSE(second.had_index);  // that event was never trained on

  // The bytes are gone from the store's files once it is closed (the last boundary keys
  // in RocksDB's MANIFEST go when the store is next opened, which rewrites it).
  Close();
  Reopen();
  Close();
  EXPECT_EQ(FilesHolding(dir_, "member-2"), std::vector<std::string>{});
  EXPECT_EQ(FilesHolding(dir_, "loan-9"), std::vector<std::string>{});  // one of their ids
  EXPECT_FALSE(FilesHolding(dir_, "member-3").empty());
  // Deletion markers hold the deleted keys (ids among them): compaction dropped them all.
  EXPECT_EQ(Deletions(dir_), 0u);
}

TEST_F(ForgetTest, RefusesBadIdsAndSecondaries) {
  ForgetReport r;
  EXPECT_EQ(store_->ForgetUser("", &r).code(), Status::Code::kInvalidArgument);
  EXPECT_EQ(store_->ForgetUser(std::string(kForgottenIdPrefix) + "1", &r).code(),
            Status::Code::kInvalidArgument);
  ASSERT_TRUE(store_->ForgetUser("nobody", &r).ok());
  EXPECT_EQ(r.events, 0u);
  EXPECT_FALSE(r.had_index);
  std::unique_ptr<Store> follower;
  ASSERT_TRUE(Store::OpenSecondary(dir_, scratch_.Sub("f"), &follower).ok());
  EXPECT_EQ(follower->ForgetUser("member-1", &r).code(), Status::Code::kFailedPrecondition);
}

}  // namespace
}  // namespace plumb::store
