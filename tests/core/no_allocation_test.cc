// The request path must allocate nothing in steady state (STYLE.md: "Hot paths allocate
// nothing per request"). This binary replaces the global operator new to count allocations,
// which is why it is separate from core_tests.
#include <gtest/gtest.h>

#include <atomic>
#include <cstdlib>
#include <new>
#include <random>
#include <vector>

#include "core/scan.h"
#include "core/topk.h"

namespace {
std::atomic<long> g_allocations{0};
}

void* operator new(std::size_t n) {
  g_allocations.fetch_add(1, std::memory_order_relaxed);
  if (void* p = std::malloc(n == 0 ? 1 : n)) return p;
  throw std::bad_alloc();
}
void operator delete(void* p) noexcept { std::free(p); }
void operator delete(void* p, std::size_t) noexcept { std::free(p); }

namespace plumb {
namespace {

TEST(NoAllocationTest, RepeatedTopKScansAllocateNothing) {
#if defined(__SANITIZE_ADDRESS__)
  GTEST_SKIP() << "the sanitizer owns operator new";
#endif
  std::mt19937_64 rng(1);
  std::normal_distribution<float> normal(0.0f, 1.0f);
  ItemMatrix m(5000, 32);
  for (std::size_t r = 0; r < m.rows(); ++r)
    for (auto& v : m.mutable_row(r)) v = normal(rng);
  std::vector<float> norms(m.rows());
  ASSERT_TRUE(row_norms(m.view(), norms).ok());
  std::vector<std::vector<float>> queries(8, std::vector<float>(32));
  for (auto& q : queries)
    for (auto& v : q) v = normal(rng);
  std::vector<uint32_t> seen = {3, 99, 1000, 4999};
  std::vector<uint64_t> bitmap(m.rows() / 64 + 1, 0x0101010101010101ull);
  std::vector<float> scratch(kDefaultScanBlockRows);
  TopKSelector sel;
  ScanOutcome outcome;
  int checks = 0;
  auto stop = [&] { return ++checks > 1000; };

  // Warm-up: the first Reset reserves the largest k this worker will use.
  sel.Reset(100);
  ASSERT_TRUE(top_k_by_dot(m.view(), queries[0], {}, scratch, &sel, &outcome).ok());
  (void)sel.SortedResult();

  const long before = g_allocations.load();
  for (std::size_t i = 0; i < queries.size(); ++i) {
    sel.Reset(10 + i * 10);
    ASSERT_TRUE(
        top_k_by_dot(m.view(), queries[i], Exclusions{bitmap, seen}, scratch, &sel, &outcome, stop)
            .ok());
    ASSERT_EQ(sel.SortedResult().size(), 10 + i * 10);
    sel.Reset(20);
    ASSERT_TRUE(
        top_k_by_cosine(m.view(), norms, queries[i], Exclusions{{}, seen}, scratch, &sel, &outcome)
            .ok());
    ASSERT_EQ(sel.SortedResult().size(), 20u);
  }
  EXPECT_EQ(g_allocations.load() - before, 0);
  // The pruned scan: its int8 copy is built (and allocates) first.
  QuantizedItems codes;
  ASSERT_TRUE(QuantizedItems::Build(m.view(), &codes).ok());
  const long before_pruned = g_allocations.load();
  for (std::size_t i = 0; i < queries.size(); ++i) {
    sel.Reset(20);
    ASSERT_TRUE(top_k_by_dot_pruned(m.view(), codes, queries[i], Exclusions{bitmap, seen}, scratch,
                                    &sel, &outcome, stop)
                    .ok());
    ASSERT_EQ(sel.SortedResult().size(), 20u);
  }
  EXPECT_EQ(g_allocations.load() - before_pruned, 0);
  // The counter works: a vector allocation is seen.
  std::vector<int>* v = new std::vector<int>(3);
  EXPECT_GE(g_allocations.load() - before, 2);
  delete v;
}

}  // namespace
}  // namespace plumb
