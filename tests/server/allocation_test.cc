// The scoring path allocates nothing per request once a thread is warm (STYLE.md: hot paths
// allocate nothing in steady state). Measured by counting this thread's calls to the global
// operator new, which this test program replaces.
#include <gtest/gtest.h>

#include <cstdlib>
#include <new>

#include "server/scorer.h"
#include "tests/server/test_model.h"

// The replacements below pair malloc with free; GCC 12 still warns about "mismatched"
// new/delete when it inlines them into callers.
#pragma GCC diagnostic ignored "-Wmismatched-new-delete"

namespace {
thread_local long allocations = 0;
}

void* operator new(std::size_t n) {
  ++allocations;
  if (void* p = std::malloc(n ? n : 1)) return p;
  throw std::bad_alloc();
}
void* operator new[](std::size_t n) { return operator new(n); }
void* operator new(std::size_t n, std::align_val_t a) {
  ++allocations;
  const std::size_t align = static_cast<std::size_t>(a);
  if (void* p = std::aligned_alloc(align, (n + align - 1) / align * align)) return p;
  throw std::bad_alloc();
}
void* operator new[](std::size_t n, std::align_val_t a) { return operator new(n, a); }
// The nothrow forms too (core/aligned.cc uses one), so that every allocation is counted and
// matched by the deletes below.
void* operator new(std::size_t n, const std::nothrow_t&) noexcept {
  ++allocations;
  return std::malloc(n ? n : 1);
}
void* operator new[](std::size_t n, const std::nothrow_t& t) noexcept { return operator new(n, t); }
void* operator new(std::size_t n, std::align_val_t a, const std::nothrow_t&) noexcept {
  ++allocations;
  const std::size_t align = static_cast<std::size_t>(a);
  return std::aligned_alloc(align, (n + align - 1) / align * align);
}
void* operator new[](std::size_t n, std::align_val_t a, const std::nothrow_t& t) noexcept {
  return operator new(n, a, t);
}
void operator delete(void* p) noexcept { std::free(p); }
void operator delete(void* p, std::size_t) noexcept { std::free(p); }
void operator delete[](void* p) noexcept { std::free(p); }
void operator delete[](void* p, std::size_t) noexcept { std::free(p); }
void operator delete(void* p, std::align_val_t) noexcept { std::free(p); }
void operator delete(void* p, std::size_t, std::align_val_t) noexcept { std::free(p); }
void operator delete[](void* p, std::align_val_t) noexcept { std::free(p); }
void operator delete[](void* p, std::size_t, std::align_val_t) noexcept { std::free(p); }

namespace plumb::server {
namespace {

TEST(SteadyStateTest, ScoringAllocatesNothingOnAWarmThread) {
  const testing::TestModel m = testing::RandomModel(50, 20000, 32, 30, 4, false);
  auto snap = testing::BuildSnapshot(m, 1);
  Scorer scorer;
  RankedList out;
  std::vector<std::string_view> exclude = {"tool-1", "tool-99", "tool-nope", "tool-5000"};
  std::vector<std::string_view> recent = {"tool-3", "tool-4", "tool-17"};
  std::vector<std::string_view> candidates = {"tool-8", "tool-x", "tool-9", "tool-8", "tool-y"};

  auto one_round = [&](uint32_t u) {
    RecommendQuery known;
    known.user_id = m.user_ids[u];
    known.count = 20;
    known.exclude_seen = true;
    known.exclude_item_ids = exclude;
    known.deadline = std::chrono::system_clock::now() + std::chrono::seconds(5);
    ASSERT_TRUE(scorer.Recommend(*snap, known, &out).ok());
    RecommendQuery guest = known;
    guest.user_id = "guest";
    guest.recent_item_ids = recent;
    ASSERT_TRUE(scorer.Recommend(*snap, guest, &out).ok());
    ASSERT_TRUE(out.folded_in);
    guest.recent_item_ids = {};
    guest.unknown_user = UnknownUserPolicy::kMostInteracted;
    ASSERT_TRUE(scorer.Recommend(*snap, guest, &out).ok());
    CandidatesQuery cq;
    cq.user_id = m.user_ids[u];
    cq.candidate_item_ids = candidates;
    ASSERT_TRUE(scorer.RankCandidates(*snap, cq, &out).ok());
    SimilarQuery sq;
    sq.item_id = m.item_ids[u];
    sq.count = 20;
    sq.exclude_item_ids = exclude;
    ASSERT_TRUE(scorer.SimilarItems(*snap, sq, &out).ok());
  };
  for (uint32_t u = 0; u < 5; ++u) one_round(u);  // warm the thread's scratch
  const long before = allocations;
  for (uint32_t u = 0; u < 50; ++u) one_round(u);
  EXPECT_EQ(allocations - before, 0) << "allocations in 250 warm requests";
  EXPECT_GT(before, 0);  // the counter does count (building the snapshot allocated)
}

}  // namespace
}  // namespace plumb::server
