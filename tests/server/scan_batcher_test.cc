#include "server/scan_batcher.h"

#include <gtest/gtest.h>

#include <atomic>
#include <random>
#include <thread>
#include <vector>

namespace plumb::server {
namespace {

ItemMatrix RandomMatrix(std::size_t rows, std::size_t dim, uint64_t seed) {
  std::mt19937_64 rng(seed);
  std::normal_distribution<float> normal(0.0f, 1.0f);
  ItemMatrix m(rows, dim);
  for (std::size_t r = 0; r < rows; ++r)
    for (auto& v : m.mutable_row(r)) v = normal(rng);
  return m;
}

std::vector<ScoredIndex> Alone(const ItemMatrix& m, const std::vector<float>& q,
                               const std::vector<uint32_t>& excluded, std::size_t k) {
  TopKSelector sel(k);
  ScanOutcome outcome;
  std::vector<float> scratch(kDefaultScanBlockRows);
  EXPECT_TRUE(top_k_by_dot(m.view(), q, Exclusions{{}, excluded}, scratch, &sel, &outcome).ok());
  auto r = sel.SortedResult();
  return {r.begin(), r.end()};
}

// Many threads on two matrices at once: every answer must equal the caller's own scan of its
// own matrix (the batcher may only group tasks of the same matrix), and under this much
// concurrency with one pass at a time, passes must actually be shared.
TEST(ScanBatcherTest, ConcurrentCallersGetExactlyTheirOwnAnswers) {
  const ItemMatrix a = RandomMatrix(20000, 24, 1), b = RandomMatrix(15000, 24, 2);
  ScanBatcher batcher(ScanBatchOptions{.max_batch = 4, .max_concurrent = 1});
  constexpr int kThreads = 8, kCalls = 30;
  std::atomic<int> mismatches{0};
  std::vector<std::thread> threads;
  for (int t = 0; t < kThreads; ++t) {
    threads.emplace_back([&, t] {
      std::mt19937_64 rng(100 + t);
      std::normal_distribution<float> normal(0.0f, 1.0f);
      TopKSelector sel;
      for (int c = 0; c < kCalls; ++c) {
        const ItemMatrix& m = (t + c) % 2 == 0 ? a : b;
        std::vector<float> q(24);
        for (auto& v : q) v = normal(rng);
        std::vector<uint32_t> excluded;
        for (uint32_t r = static_cast<uint32_t>(rng() % 50); r < m.rows(); r += 97)
          excluded.push_back(r);
        const std::size_t k = 1 + rng() % 30;
        sel.Reset(k);
        ScanOutcome outcome;
        const Status s =
            batcher.Run(m.view(), ScanTask{q, Exclusions{{}, excluded}, &sel, &outcome, {}});
        auto got = sel.SortedResult();
        if (!s.ok() || outcome.stopped_early || outcome.rows_scanned != m.rows() ||
            std::vector<ScoredIndex>(got.begin(), got.end()) != Alone(m, q, excluded, k)) {
          ++mismatches;
        }
      }
    });
  }
  for (auto& th : threads) th.join();
  EXPECT_EQ(mismatches.load(), 0);
  const ScanBatchCounts counts = batcher.counts();
  EXPECT_EQ(counts.queries, uint64_t{kThreads * kCalls});
  // Eight callers and one pass at a time: most calls arrive while a pass runs and queue.
  EXPECT_LT(counts.passes, counts.queries);
}

TEST(ScanBatcherTest, ABadTaskFailsAloneAndAQuietCallerScansAtOnce) {
  const ItemMatrix m = RandomMatrix(1000, 8, 3);
  ScanBatcher batcher(ScanBatchOptions{.max_batch = 8, .max_concurrent = 2});
  std::vector<float> wrong(7), right(8, 0.5f);
  TopKSelector sel(5);
  ScanOutcome outcome;
  EXPECT_EQ(batcher.Run(m.view(), ScanTask{wrong, {}, &sel, &outcome, {}}).code(),
            Status::Code::kInvalidArgument);
  EXPECT_EQ(batcher.Run(m.view(), ScanTask{right, {}, nullptr, &outcome, {}}).code(),
            Status::Code::kInvalidArgument);
  EXPECT_EQ(batcher.counts().passes, 0u);
  ASSERT_TRUE(batcher.Run(m.view(), ScanTask{right, {}, &sel, &outcome, {}}).ok());
  auto got = sel.SortedResult();
  EXPECT_EQ(std::vector<ScoredIndex>(got.begin(), got.end()), Alone(m, right, {}, 5));
  EXPECT_EQ(batcher.counts().passes, 1u);
  EXPECT_EQ(batcher.counts().queries, 1u);
}

TEST(ScanBatcherTest, StopCheckStillEndsAScanEarly) {
  const ItemMatrix m = RandomMatrix(50000, 8, 4);
  ScanBatcher batcher;
  std::vector<float> q(8, 1.0f);
  TopKSelector sel(5);
  ScanOutcome outcome;
  auto always = [] { return true; };
  ASSERT_TRUE(batcher.Run(m.view(), ScanTask{q, {}, &sel, &outcome, always}).ok());
  EXPECT_TRUE(outcome.stopped_early);
  EXPECT_LT(outcome.rows_scanned, m.rows());
}

}  // namespace
}  // namespace plumb::server
