// ExposureWindow: the window holds the last window_lists lists served, whichever request
// threads served them (each thread records through its own shard), and across version
// changes: the window keeps the lists served before a swap, so
// the gauges describe the window the settings name, not only what was served since the last
// publish. Expected figures come from core's summarize_exposure over counts written out by
// hand (the window's own arithmetic is the function under test only for the counting).
#include "server/exposure_window.h"

#include <gtest/gtest.h>

#include <thread>
#include <vector>

#include "core/metrics.h"
#include "tests/server/test_model.h"

namespace plumb::server {
namespace {

using testing::BuildSnapshot;
using testing::RandomModel;

// Records `lists` lists of one item each (item = list number mod catalogue) from `threads`
// threads, one after the other, so each thread records through a shard of its own.
void RecordFromThreads(ExposureWindow* window, const Snapshot& snap, int threads, int lists) {
  int next = 0;
  for (int t = 0; t < threads; ++t) {
    std::thread([&] {
      for (int k = 0; k < lists / threads; ++k, ++next) {
        const uint32_t item = static_cast<uint32_t>(next) % snap.num_items();
        window->Record(snap, std::span<const uint32_t>(&item, 1));
      }
    }).join();
  }
}

TEST(ExposureWindowTest, HoldsTheLastWindowListsWhateverTheThreads) {
  const auto snap = BuildSnapshot(RandomModel(10, 50, 4, 3, 1, false), 1);
  for (int threads : {1, 2, 3, 8}) {
    ExposureWindowOptions options;
    options.window_lists = 100;
    ExposureWindow window(options);
    RecordFromThreads(&window, *snap, threads, 120 * threads);
    const ExposureFigures f = window.Summarize(*snap);
    EXPECT_EQ(f.lists, 100u) << threads << " threads";
    EXPECT_EQ(f.slots, 100u) << threads << " threads";
  }
}

TEST(ExposureWindowTest, KeepsTheNewestListsAndAllWhileFewerWereServed) {
  const auto snap = BuildSnapshot(RandomModel(10, 50, 4, 3, 1, false), 1);
  ExposureWindowOptions options;
  options.window_lists = 50;
  ExposureWindow window(options);
  RecordFromThreads(&window, *snap, 2, 30);
  EXPECT_EQ(window.Summarize(*snap).lists, 30u);  // fewer than the window: all of them
  // 100 lists of one item each, item = k mod 50, through 2 threads: the last 50 lists are
  // items 0..49 once each, so every item is covered once and the Gini coefficient is 0.
  ExposureWindow full(options);
  RecordFromThreads(&full, *snap, 2, 100);
  const ExposureFigures f = full.Summarize(*snap);
  EXPECT_EQ(f.lists, 50u);
  EXPECT_DOUBLE_EQ(f.summary.coverage, 1.0);
  EXPECT_NEAR(f.summary.gini, 0.0, 1e-12);
}

ExposureWindowOptions Options(uint32_t lists) {
  ExposureWindowOptions o;
  o.window_lists = lists;
  o.groups = 2;
  o.shards = 1;  // one thread records here: one shard makes the window exact
  return o;
}

TEST(ExposureWindowTest, ASwapKeepsTheListsAlreadyInTheWindow) {
  const testing::TestModel m1 = RandomModel(5, 10, 4, 2, 1, false);
  testing::TestModel m2 = RandomModel(5, 12, 4, 3, 2, false);  // two items more
  auto v1 = BuildSnapshot(m1, 1);
  auto v2 = BuildSnapshot(m2, 2);
  ExposureWindow window(Options(100));
  const std::vector<uint32_t> a = {0, 1, 2}, b = {2, 3, 9};
  for (int k = 0; k < 10; ++k) window.Record(*v1, a);
  for (int k = 0; k < 5; ++k) window.Record(*v2, b);
  window.Record(*v2, std::vector<uint32_t>{10, 11});  // items only version 2 has

  const ExposureFigures f = window.Summarize(*v2);
  // Before the fix the swap emptied the window: 6 lists (those served by version 2).
  EXPECT_EQ(f.lists, 16u);
  EXPECT_EQ(f.slots, 10u * 3 + 5 * 3 + 2);
  // The same figures from the counts by hand: item 0 x10, 1 x10, 2 x15, 3 x5, 9 x5, 10, 11.
  std::vector<uint64_t> counts(12, 0);
  counts[0] = 10, counts[1] = 10, counts[2] = 15, counts[3] = 5, counts[9] = 5;
  counts[10] = 1, counts[11] = 1;
  std::vector<uint64_t> degrees(m2.degrees.begin(), m2.degrees.end());
  std::vector<uint32_t> groups;
  ASSERT_TRUE(popularity_groups(degrees, 2, &groups).ok());
  ExposureSummary expected;
  ASSERT_TRUE(summarize_exposure(counts, degrees, groups, 2, &expected).ok());
  EXPECT_DOUBLE_EQ(f.summary.gini, expected.gini);
  EXPECT_DOUBLE_EQ(f.summary.coverage, 7.0 / 12.0);
  EXPECT_DOUBLE_EQ(f.summary.arp, expected.arp);
  ASSERT_EQ(f.summary.exposure_group_shares.size(), 2u);
  EXPECT_DOUBLE_EQ(f.summary.exposure_group_shares[0], expected.exposure_group_shares[0]);
}

TEST(ExposureWindowTest, ARollbackToASmallerCatalogueCountsOnlyItsItems) {
  const testing::TestModel m1 = RandomModel(5, 10, 4, 2, 1, false);
  const testing::TestModel m2 = RandomModel(5, 12, 4, 3, 2, false);
  auto v1 = BuildSnapshot(m1, 1);
  auto v2 = BuildSnapshot(m2, 2);
  ExposureWindow window(Options(100));
  window.Record(*v2, std::vector<uint32_t>{0, 10, 11});
  window.Record(*v1, std::vector<uint32_t>{0, 1});
  const ExposureFigures f = window.Summarize(*v1);
  EXPECT_EQ(f.lists, 2u);
  EXPECT_EQ(f.slots, 3u);  // items 10 and 11 are not in version 1's catalogue
  EXPECT_DOUBLE_EQ(f.summary.coverage, 2.0 / 10.0);
  // Forward again: everything counts.
  EXPECT_EQ(window.Summarize(*v2).slots, 5u);
}

TEST(ExposureWindowTest, TheWindowStillSlidesByCount) {
  const testing::TestModel m = RandomModel(5, 10, 4, 2, 1, false);
  auto v1 = BuildSnapshot(m, 1);
  auto v2 = BuildSnapshot(m, 2);
  ExposureWindow window(Options(3));
  window.Record(*v1, std::vector<uint32_t>{0});
  window.Record(*v1, std::vector<uint32_t>{1});
  window.Record(*v2, std::vector<uint32_t>{2});
  window.Record(*v2, std::vector<uint32_t>{3});  // pushes out the list of item 0
  const ExposureFigures f = window.Summarize(*v2);
  EXPECT_EQ(f.lists, 3u);
  EXPECT_DOUBLE_EQ(f.summary.coverage, 3.0 / 10.0);
}

}  // namespace
}  // namespace plumb::server

namespace plumb::server {
namespace {

TEST(ExposureWindowTest, ListsTheMostServedItemsMostFirstTiesBySmallerIndex) {
  const auto snap = testing::BuildSnapshot(testing::RandomModel(10, 50, 4, 3, 1, false), 1);
  ExposureWindow window(ExposureWindowOptions{});
  // Hand-counted: item 7 three times, items 2 and 9 twice each, item 4 once.
  for (uint32_t item : {7u, 9u, 7u, 2u, 4u, 9u, 2u, 7u}) {
    window.Record(*snap, std::span<const uint32_t>(&item, 1));
  }
  const ExposureFigures f = window.Summarize(*snap, 3);
  ASSERT_EQ(f.top_items.size(), 3u);
  EXPECT_EQ(f.top_items[0], (std::pair<uint32_t, uint64_t>{7, 3}));
  EXPECT_EQ(f.top_items[1], (std::pair<uint32_t, uint64_t>{2, 2}));
  EXPECT_EQ(f.top_items[2], (std::pair<uint32_t, uint64_t>{9, 2}));
  EXPECT_EQ(window.Summarize(*snap, 100).top_items.size(), 4u);  // only items served
  EXPECT_TRUE(window.Summarize(*snap).top_items.empty());
}

}  // namespace
}  // namespace plumb::server
