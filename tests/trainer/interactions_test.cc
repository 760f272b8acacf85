#include "trainer/interactions.h"

#include <gtest/gtest.h>

#include <algorithm>
#include <set>
#include <vector>

#include "tests/trainer/test_models.h"

namespace plumb::trainer {
namespace {

TEST(Interactions, AddDeduplicatesAndTracksDegrees) {
  Interactions d;
  bool added = false;
  ASSERT_TRUE(d.Add(2, 7, &added).ok());
  EXPECT_TRUE(added);
  ASSERT_TRUE(d.Add(2, 3, &added).ok());
  ASSERT_TRUE(d.Add(2, 7, &added).ok());
  EXPECT_FALSE(added);
  ASSERT_TRUE(d.Add(0, 7, &added).ok());
  EXPECT_EQ(d.size(), 3u);
  EXPECT_EQ(d.num_users(), 3u);
  EXPECT_EQ(d.num_items(), 8u);
  EXPECT_EQ(d.num_active_users(), 2u);
  EXPECT_EQ(d.num_active_items(), 2u);
  EXPECT_EQ(d.item_degree(7), 2u);
  EXPECT_EQ(d.item_degree(3), 1u);
  EXPECT_EQ(d.item_degree(100), 0u);
  EXPECT_EQ(d.user_degree(2), 2u);
  EXPECT_TRUE(d.Contains(2, 3));
  EXPECT_FALSE(d.Contains(1, 3));
  EXPECT_FALSE(d.Contains(99, 3));
  const std::vector<uint32_t> items(d.items_of(2).begin(), d.items_of(2).end());
  EXPECT_EQ(items, (std::vector<uint32_t>{3, 7}));
  EXPECT_EQ(d.pair(1), (Pair{2, 3}));
  EXPECT_EQ(d.Add(kMaxIndex, 0).code(), Status::Code::kInvalidArgument);
  EXPECT_EQ(d.size(), 3u);
}

TEST(Interactions, AddAllReportsNewIndexes) {
  Interactions d;
  std::vector<uint64_t> fresh;
  ASSERT_TRUE(d.AddAll(std::vector<Pair>{{0, 1}, {1, 1}, {0, 1}, {2, 0}}, &fresh).ok());
  EXPECT_EQ(fresh, (std::vector<uint64_t>{0, 1, 2}));
  fresh.clear();
  ASSERT_TRUE(d.AddAll(std::vector<Pair>{{1, 1}, {1, 2}}, &fresh).ok());
  EXPECT_EQ(fresh, (std::vector<uint64_t>{3}));
  EXPECT_EQ(d.pair(3), (Pair{1, 2}));
}

// Build and incremental Add agree on everything; membership agrees with a std::set.
TEST(Interactions, BuildMatchesIncrementalAddAndASet) {
  Rng rng(3);
  std::vector<Pair> pairs;
  std::set<std::pair<uint32_t, uint32_t>> truth;
  for (int n = 0; n < 5000; ++n) {
    Pair p{static_cast<uint32_t>(rng.Uniform(100)), static_cast<uint32_t>(rng.Uniform(80))};
    pairs.push_back(p);
    truth.insert({p.user, p.item});
  }
  Interactions built, added;
  ASSERT_TRUE(Interactions::Build(pairs, 120, 90, &built).ok());
  ASSERT_TRUE(added.EnsureShape(120, 90).ok());
  ASSERT_TRUE(added.AddAll(pairs).ok());
  EXPECT_EQ(built.size(), truth.size());
  EXPECT_EQ(added.size(), truth.size());
  EXPECT_EQ(built.num_users(), 120u);
  EXPECT_EQ(built.num_items(), 90u);
  // Same pairs in the same (first-occurrence) order.
  ASSERT_EQ(built.size(), added.size());
  for (size_t n = 0; n < built.size(); ++n) EXPECT_EQ(built.pair(n), added.pair(n));
  for (uint32_t u = 0; u < 121; ++u) {
    for (uint32_t i = 0; i < 91; ++i) {
      const bool want = truth.count({u, i}) > 0;
      ASSERT_EQ(built.Contains(u, i), want) << u << "," << i;
      ASSERT_EQ(added.Contains(u, i), want);
    }
  }
  for (uint32_t i = 0; i < 90; ++i) EXPECT_EQ(built.item_degree(i), added.item_degree(i));
  EXPECT_EQ(built.num_active_items(), added.num_active_items());
  EXPECT_EQ(built.num_active_users(), added.num_active_users());
}

TEST(Interactions, ContainsSortedEdgeCases) {
  const std::vector<uint32_t> none;
  EXPECT_FALSE(Interactions::ContainsSorted(none, 0));
  const std::vector<uint32_t> one{5};
  EXPECT_TRUE(Interactions::ContainsSorted(one, 5));
  EXPECT_FALSE(Interactions::ContainsSorted(one, 4));
  EXPECT_FALSE(Interactions::ContainsSorted(one, 6));
  std::vector<uint32_t> many;
  for (uint32_t x = 1; x < 200; x += 3) many.push_back(x);
  for (uint32_t x = 0; x < 210; ++x) {
    EXPECT_EQ(Interactions::ContainsSorted(many, x),
              std::binary_search(many.begin(), many.end(), x));
  }
}

}  // namespace
}  // namespace plumb::trainer
