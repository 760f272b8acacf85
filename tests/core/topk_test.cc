#include "core/topk.h"

#include <gtest/gtest.h>

#include <algorithm>
#include <cmath>
#include <limits>
#include <random>
#include <vector>

namespace plumb {
namespace {

// Reference: sort every candidate by (score desc, index asc), drop NaN, keep the first k.
std::vector<ScoredIndex> FullSortTopK(const std::vector<ScoredIndex>& all, std::size_t k) {
  std::vector<ScoredIndex> v;
  for (const auto& c : all)
    if (!std::isnan(c.score)) v.push_back(c);
  std::sort(v.begin(), v.end(), ranks_before);
  if (v.size() > k) v.resize(k);
  return v;
}

std::vector<ScoredIndex> Collect(TopKSelector& sel) {
  auto r = sel.SortedResult();
  return {r.begin(), r.end()};
}

TEST(TopKSelectorTest, MatchesFullSortOnRandomDataWithTies) {
  std::mt19937_64 rng(7);
  for (int trial = 0; trial < 300; ++trial) {
    const std::size_t n = rng() % 300;
    const std::size_t k = rng() % 40;
    // Few distinct values make ties common; push in a shuffled index order so that the
    // tie-break by index is exercised out of order.
    const int distinct = 1 + static_cast<int>(rng() % 12);
    std::vector<ScoredIndex> all;
    for (std::size_t i = 0; i < n; ++i) {
      all.push_back({static_cast<uint32_t>(i), static_cast<float>(rng() % distinct) - 3.0f});
    }
    std::shuffle(all.begin(), all.end(), rng);
    TopKSelector sel(k);
    for (const auto& c : all) sel.Push(c.index, c.score);
    ASSERT_EQ(Collect(sel), FullSortTopK(all, k)) << "trial " << trial << " n=" << n << " k=" << k;
  }
}

TEST(TopKSelectorTest, KLargerThanCandidatesKeepsAllSorted) {
  TopKSelector sel(10);
  sel.Push(3, 1.0f);
  sel.Push(1, 2.0f);
  sel.Push(2, 1.0f);
  EXPECT_FALSE(sel.full());
  const std::vector<ScoredIndex> expect = {{1, 2.0f}, {2, 1.0f}, {3, 1.0f}};
  EXPECT_EQ(Collect(sel), expect);
}

TEST(TopKSelectorTest, ZeroKKeepsNothing) {
  TopKSelector sel(0);
  sel.Push(1, 5.0f);
  sel.Push(2, std::numeric_limits<float>::infinity());
  EXPECT_TRUE(sel.SortedResult().empty());
}

TEST(TopKSelectorTest, NaNIsNeverKeptInfinityIs) {
  const float nan = std::numeric_limits<float>::quiet_NaN();
  const float inf = std::numeric_limits<float>::infinity();
  TopKSelector sel(3);
  sel.Push(0, nan);
  sel.Push(1, -inf);
  sel.Push(2, nan);
  sel.Push(3, inf);
  const std::vector<ScoredIndex> expect = {{3, inf}, {1, -inf}};
  EXPECT_EQ(Collect(sel), expect);
}

TEST(TopKSelectorTest, ThresholdIsWorstKeptScoreOnceFull) {
  TopKSelector sel(2);
  EXPECT_EQ(sel.threshold(), -std::numeric_limits<float>::infinity());
  sel.Push(0, 5.0f);
  sel.Push(1, 3.0f);
  EXPECT_EQ(sel.threshold(), 3.0f);
  sel.Push(2, 4.0f);
  EXPECT_EQ(sel.threshold(), 4.0f);
  // Equal score with a smaller index replaces the worst (index 2); a larger index does not.
  sel.Push(7, 4.0f);
  sel.Push(1, 4.0f);
  const std::vector<ScoredIndex> expect = {{0, 5.0f}, {1, 4.0f}};
  EXPECT_EQ(Collect(sel), expect);
}

TEST(TopKSelectorTest, ResetReusesCapacityAndSortedResultLeavesStateIntact) {
  TopKSelector sel(50);
  for (uint32_t i = 0; i < 200; ++i) sel.Push(i, static_cast<float>(i % 17));
  const auto first = sel.SortedResult();
  const ScoredIndex* storage = first.data();
  // Pushing after SortedResult continues the same selection.
  sel.Push(1000, 100.0f);
  auto again = sel.SortedResult();
  EXPECT_EQ(again.front(), (ScoredIndex{1000, 100.0f}));
  EXPECT_EQ(again.size(), 50u);
  // Smaller k after a larger one: same storage, no reallocation.
  sel.Reset(20);
  EXPECT_EQ(sel.size(), 0u);
  for (uint32_t i = 0; i < 200; ++i) sel.Push(i, static_cast<float>(i));
  auto r = sel.SortedResult();
  EXPECT_EQ(r.data(), storage);
  ASSERT_EQ(r.size(), 20u);
  EXPECT_EQ(r.front().index, 199u);
  EXPECT_EQ(r.back().index, 180u);
}

}  // namespace
}  // namespace plumb
