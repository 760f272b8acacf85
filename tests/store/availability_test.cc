// Item availability in the store (store/availability.cc): the withdrawn set, its generation,
// durability, and what a follower sees.
#include "tests/store/store_fixture.h"

namespace plumb::store {
namespace {

using testing::StoreFixture;
using AvailabilityTest = StoreFixture;

std::vector<std::string> Ids(const std::vector<WithdrawnItem>& items) {
  std::vector<std::string> out;
  for (const WithdrawnItem& w : items) out.push_back(w.item_id);
  return out;
}

TEST_F(AvailabilityTest, WithdrawRestoreCountsAndGenerations) {
  uint64_t generation = 99, withdrawn = 99;
  ASSERT_TRUE(store_->GetAvailability(&generation, &withdrawn).ok());
  EXPECT_EQ(generation, 0u);
  EXPECT_EQ(withdrawn, 0u);

  // An item the dictionary does not know yet can be withdrawn too; a repeat counts once.
  const std::vector<std::string> first = {"tool-drill", "tool-ladder", "tool-unseen",
                                          "tool-drill"};
  AvailabilityChange change;
  ASSERT_TRUE(store_->SetItemsWithdrawn(first, true, &change).ok());
  EXPECT_EQ(change.changed, 3u);
  EXPECT_EQ(change.unchanged, 1u);
  EXPECT_EQ(change.withdrawn, 3u);
  EXPECT_EQ(change.generation, 1u);

  // Withdrawing again changes nothing and keeps the generation.
  const std::vector<std::string> again = {"tool-ladder"};
  ASSERT_TRUE(store_->SetItemsWithdrawn(again, true, &change).ok());
  EXPECT_EQ(change.changed, 0u);
  EXPECT_EQ(change.generation, 1u);

  const std::vector<std::string> back = {"tool-ladder", "tool-never-withdrawn"};
  ASSERT_TRUE(store_->SetItemsWithdrawn(back, false, &change).ok());
  EXPECT_EQ(change.changed, 1u);
  EXPECT_EQ(change.unchanged, 1u);
  EXPECT_EQ(change.withdrawn, 2u);
  EXPECT_EQ(change.generation, 2u);

  std::vector<WithdrawnItem> items;
  ASSERT_TRUE(store_->ListWithdrawnItems("", 0, &items).ok());
  EXPECT_EQ(Ids(items), (std::vector<std::string>{"tool-drill", "tool-unseen"}));
  EXPECT_GT(items[0].withdrawn_ms, 1'600'000'000'000);

  // Durable: a reopen finds the same set and generation.
  Reopen();
  ASSERT_TRUE(store_->GetAvailability(&generation, &withdrawn).ok());
  EXPECT_EQ(generation, 2u);
  EXPECT_EQ(withdrawn, 2u);
  ASSERT_TRUE(store_->ListWithdrawnItems("", 0, &items).ok());
  EXPECT_EQ(Ids(items), (std::vector<std::string>{"tool-drill", "tool-unseen"}));

  // A bad id is refused and nothing of the call is written.
  const std::vector<std::string> bad = {"tool-saw", ""};
  EXPECT_EQ(store_->SetItemsWithdrawn(bad, true, &change).code(), Status::Code::kInvalidArgument);
  ASSERT_TRUE(store_->GetAvailability(&generation, &withdrawn).ok());
  EXPECT_EQ(withdrawn, 2u);
}

TEST_F(AvailabilityTest, ListingPagesInIdOrder) {
  std::vector<std::string> ids;
  for (int k = 0; k < 25; ++k) ids.push_back("tool-" + std::to_string(100 + k));
  AvailabilityChange change;
  ASSERT_TRUE(store_->SetItemsWithdrawn(ids, true, &change).ok());
  std::vector<std::string> seen;
  std::string after;
  std::vector<WithdrawnItem> page;
  do {
    ASSERT_TRUE(store_->ListWithdrawnItems(after, 10, &page).ok());
    ASSERT_LE(page.size(), 10u);
    for (const WithdrawnItem& w : page) seen.push_back(w.item_id);
    if (!page.empty()) after = page.back().item_id;
  } while (page.size() == 10);
  EXPECT_EQ(seen, ids);  // "tool-100" .. "tool-124" sort as written
}

TEST_F(AvailabilityTest, AFollowerSeesChangesAfterCatchingUpAndCannotWrite) {
  std::unique_ptr<Store> follower;
  ASSERT_TRUE(Store::OpenSecondary(dir_, scratch_.Sub("follower"), &follower).ok());
  AvailabilityChange change;
  const std::vector<std::string> ids = {"tool-drill"};
  ASSERT_TRUE(store_->SetItemsWithdrawn(ids, true, &change).ok());
  uint64_t generation = 0, withdrawn = 0;
  ASSERT_TRUE(follower->GetAvailability(&generation, &withdrawn).ok());
  EXPECT_EQ(generation, 0u) << "not before a catch-up";
  ASSERT_TRUE(follower->CatchUp().ok());
  ASSERT_TRUE(follower->GetAvailability(&generation, &withdrawn).ok());
  EXPECT_EQ(generation, 1u);
  EXPECT_EQ(withdrawn, 1u);
  std::vector<WithdrawnItem> items;
  ASSERT_TRUE(follower->ListWithdrawnItems("", 0, &items).ok());
  EXPECT_EQ(Ids(items), ids);
  EXPECT_EQ(follower->SetItemsWithdrawn(ids, false, &change).code(),
            Status::Code::kFailedPrecondition);
  // Caller-set meta values cannot reach the reserved names.
  StateChange sneaky;
  sneaky.meta.emplace_back("plumb.withdrawn/tool-saw", "x");
  EXPECT_EQ(store_->Commit(sneaky).code(), Status::Code::kInvalidArgument);
}

}  // namespace
}  // namespace plumb::store
