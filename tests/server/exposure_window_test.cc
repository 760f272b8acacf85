// ExposureWindow: the window holds the last window_lists lists served, whichever request
// threads served them (each thread records through its own shard).
#include "server/exposure_window.h"

#include <gtest/gtest.h>

#include <thread>
#include <vector>

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

}  // namespace
}  // namespace plumb::server
