// Training state: id dictionaries, interaction sets, live degrees, cursor and meta values.
#include "tests/store/store_fixture.h"

namespace plumb::store {
namespace {

using testing::StoreFixture;
using TrainingStateTest = StoreFixture;

TEST_F(TrainingStateTest, IdsMapBothWaysAndSurviveReopen) {
  StateChange change;
  change.new_users = {{0, "member-ana"}, {1, "member-bo"}, {2, "member-cy"}};
  change.new_items = {{0, "tool-drill"}, {1, "tool-ladder"}};
  ASSERT_TRUE(store_->Commit(change).ok());
  EXPECT_EQ(store_->IdCount(IdSpace::kUser), 3u);
  EXPECT_EQ(store_->IdCount(IdSpace::kItem), 2u);

  for (int pass = 0; pass < 2; ++pass) {
    uint32_t index = 99;
    ASSERT_TRUE(store_->LookupId(IdSpace::kUser, "member-bo", &index).ok());
    EXPECT_EQ(index, 1u);
    ASSERT_TRUE(store_->LookupId(IdSpace::kItem, "tool-ladder", &index).ok());
    EXPECT_EQ(index, 1u);
    // The spaces are separate: a user id is no item id.
    EXPECT_TRUE(store_->LookupId(IdSpace::kItem, "member-bo", &index).IsNotFound());
    EXPECT_TRUE(store_->LookupId(IdSpace::kUser, "member-zed", &index).IsNotFound());
    std::vector<std::string> ids;
    ASSERT_TRUE(store_->LoadIds(IdSpace::kUser, 3, &ids).ok());
    EXPECT_EQ(ids, (std::vector<std::string>{"member-ana", "member-bo", "member-cy"}));
    ASSERT_TRUE(store_->LoadIds(IdSpace::kUser, 2, &ids).ok());
    EXPECT_EQ(ids, (std::vector<std::string>{"member-ana", "member-bo"}));
    ASSERT_TRUE(store_->LoadIds(IdSpace::kItem, 2, &ids).ok());
    EXPECT_EQ(ids, (std::vector<std::string>{"tool-drill", "tool-ladder"}));
    EXPECT_EQ(store_->LoadIds(IdSpace::kItem, 3, &ids).code(), Status::Code::kInvalidArgument);
    Reopen();  // counts are loaded from disk on open
    EXPECT_EQ(store_->IdCount(IdSpace::kUser), 3u);
    EXPECT_EQ(store_->IdCount(IdSpace::kItem), 2u);
  }

  // The dictionary continues where it stopped.
  StateChange more;
  more.new_users = {{3, "member-dee"}};
  ASSERT_TRUE(store_->Commit(more).ok());
  uint32_t index = 0;
  ASSERT_TRUE(store_->LookupId(IdSpace::kUser, "member-dee", &index).ok());
  EXPECT_EQ(index, 3u);
}

TEST_F(TrainingStateTest, DictionaryBeyondOneByteOfIndexes) {
  // 300 entries: indexes above 255 check that big-endian keys keep numeric order.
  AddIds(300, 1);
  std::vector<std::string> ids;
  ASSERT_TRUE(store_->LoadIds(IdSpace::kUser, 300, &ids).ok());
  for (uint32_t k = 0; k < 300; ++k) ASSERT_EQ(ids[k], "member-" + std::to_string(k));
  Reopen();
  EXPECT_EQ(store_->IdCount(IdSpace::kUser), 300u);
}

TEST_F(TrainingStateTest, InteractionsComeBackOrderedByUserThenItem) {
  AddIds(300, 300);
  StateChange change;
  // Scrambled, with indexes either side of 256 and a repeat.
  change.new_interactions = {{257, 3}, {2, 256}, {2, 1}, {0, 299}, {257, 3}, {2, 2}, {256, 0}};
  ASSERT_TRUE(store_->Commit(change).ok());

  std::vector<std::pair<uint32_t, uint32_t>> all;
  ASSERT_TRUE(
      store_->ForEachInteraction([&](uint32_t u, uint32_t i) { all.emplace_back(u, i); }).ok());
  EXPECT_EQ(all, (std::vector<std::pair<uint32_t, uint32_t>>{
                     {0, 299}, {2, 1}, {2, 2}, {2, 256}, {256, 0}, {257, 3}}));

  std::vector<uint32_t> items;
  ASSERT_TRUE(store_->UserItems(2, &items).ok());
  EXPECT_EQ(items, (std::vector<uint32_t>{1, 2, 256}));
  ASSERT_TRUE(store_->UserItems(1, &items).ok());
  EXPECT_TRUE(items.empty());
  ASSERT_TRUE(store_->UserItems(257, &items).ok());
  EXPECT_EQ(items, (std::vector<uint32_t>{3}));
}

TEST_F(TrainingStateTest, LiveDegreesAreAbsoluteAndDefaultToZero) {
  AddIds(1, 4);
  std::vector<uint32_t> degrees;
  ASSERT_TRUE(store_->LoadItemDegrees(&degrees).ok());
  EXPECT_EQ(degrees, (std::vector<uint32_t>{0, 0, 0, 0}));
  StateChange change;
  change.item_degrees = {{1, 5}, {3, 70000}};
  ASSERT_TRUE(store_->Commit(change).ok());
  change.item_degrees = {{1, 6}};
  ASSERT_TRUE(store_->Commit(change).ok());
  Reopen();
  ASSERT_TRUE(store_->LoadItemDegrees(&degrees).ok());
  EXPECT_EQ(degrees, (std::vector<uint32_t>{0, 6, 0, 70000}));
  // The vector follows the dictionary as it grows.
  AddIds(0, 2);
  ASSERT_TRUE(store_->LoadItemDegrees(&degrees).ok());
  EXPECT_EQ(degrees, (std::vector<uint32_t>{0, 6, 0, 70000, 0, 0}));
}

TEST_F(TrainingStateTest, CursorStartsAtZeroAndStaysWithinTheLog) {
  uint64_t cursor = 99;
  ASSERT_TRUE(store_->GetCursor(&cursor).ok());
  EXPECT_EQ(cursor, 0u);
  AppendResult r;
  ASSERT_TRUE(store_->AppendEvents(Loans(4, 0), &r).ok());
  StateChange change;
  change.cursor = 3;
  ASSERT_TRUE(store_->Commit(change).ok());
  Reopen();
  ASSERT_TRUE(store_->GetCursor(&cursor).ok());
  EXPECT_EQ(cursor, 3u);
  change.cursor = 5;  // beyond the last event
  EXPECT_EQ(store_->Commit(change).code(), Status::Code::kInvalidArgument);
  ASSERT_TRUE(store_->GetCursor(&cursor).ok());
  EXPECT_EQ(cursor, 3u);
}

TEST_F(TrainingStateTest, MetaValuesRoundTripAndReservedNamesAreRefused) {
  std::string value;
  EXPECT_TRUE(store_->GetMeta("auto_activate", &value).IsNotFound());
  StateChange change;
  change.meta = {{"auto_activate", "true"}, {"note", std::string("a\0b", 3)}};
  ASSERT_TRUE(store_->Commit(change).ok());
  Reopen();
  ASSERT_TRUE(store_->GetMeta("auto_activate", &value).ok());
  EXPECT_EQ(value, "true");
  ASSERT_TRUE(store_->GetMeta("note", &value).ok());
  EXPECT_EQ(value, std::string("a\0b", 3));

  StateChange reserved;
  reserved.meta = {{"plumb.cursor", "x"}};
  EXPECT_EQ(store_->Commit(reserved).code(), Status::Code::kInvalidArgument);
  StateChange empty_key;
  empty_key.meta = {{"", "x"}};
  EXPECT_EQ(store_->Commit(empty_key).code(), Status::Code::kInvalidArgument);
}

}  // namespace
}  // namespace plumb::store
