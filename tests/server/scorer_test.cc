// The scorer path of the server (ids in, ranked indexes out) against brute force: a full
// sort of every item's score, with the exclusions applied by hand. The core scan has its own
// exactness suite (tests/core/scan_test.cc); here the subject is what the server adds:
// resolving ids, seen-item and request exclusions, unknown users, candidates, similarity.
#include "server/scorer.h"

#include <gtest/gtest.h>

#include <algorithm>
#include <cmath>
#include <numeric>
#include <random>
#include <set>

#include "tests/server/test_model.h"

namespace plumb::server {
namespace {

using testing::BuildSnapshot;
using testing::RandomModel;
using testing::TestModel;

float Dot(std::span<const float> a, std::span<const float> b) {
  float s = 0.0f;
  for (size_t k = 0; k < a.size(); ++k) s += a[k] * b[k];
  return s;
}

// Full sort of all items not in `excluded`, by (score desc, index asc), cut to `count`.
std::vector<ScoredIndex> BruteForce(const TestModel& m, std::span<const float> user,
                                    const std::set<uint32_t>& excluded, size_t count) {
  std::vector<ScoredIndex> all;
  for (uint32_t i = 0; i < m.num_items; ++i) {
    if (!excluded.count(i)) all.push_back({i, Dot(user, m.item(i))});
  }
  std::sort(all.begin(), all.end(), [](const ScoredIndex& a, const ScoredIndex& b) {
    return a.score > b.score || (a.score == b.score && a.index < b.index);
  });
  if (all.size() > count) all.resize(count);
  return all;
}

TEST(ScorerTest, RecommendEqualsFullSortWithSeenAndRequestExclusionsAndTies) {
  // Values in -2..2 and dim 6: dot products are small exact integers, so most scores tie
  // with many others and the tie rule (smaller index first) decides much of every list.
  const TestModel m = RandomModel(30, 700, 6, 25, /*seed=*/11, /*small_integers=*/true);
  auto snap = BuildSnapshot(m, 3);
  Scorer scorer;
  RankedList out;
  std::mt19937 rng(5);
  int lists_with_ties = 0;
  for (uint32_t u = 0; u < m.num_users; ++u) {
    for (uint32_t count : {1u, 7u, 50u, 700u}) {
      for (bool exclude_seen : {false, true}) {
        std::vector<std::string> exclude_storage;
        std::set<uint32_t> excluded;
        std::uniform_int_distribution<uint32_t> pick(0, m.num_items - 1);
        for (int k = 0; k < 40; ++k) {
          const uint32_t i = pick(rng);
          exclude_storage.push_back(m.item_ids[i]);
          excluded.insert(i);
        }
        exclude_storage.push_back("tool-not-in-the-catalogue");    // ignored
        exclude_storage.push_back(m.item_ids[*excluded.begin()]);  // duplicate, harmless
        std::vector<std::string_view> exclude(exclude_storage.begin(), exclude_storage.end());
        if (exclude_seen) excluded.insert(m.seen[u].begin(), m.seen[u].end());

        RecommendQuery q;
        q.user_id = m.user_ids[u];
        q.count = count;
        q.exclude_seen = exclude_seen;
        q.exclude_item_ids = exclude;
        ASSERT_TRUE(scorer.Recommend(*snap, q, &out).ok());
        const auto expected = BruteForce(m, m.user(u), excluded, count);
        ASSERT_EQ(out.items.size(), expected.size()) << "user " << u << " count " << count;
        for (size_t r = 0; r < expected.size(); ++r) {
          ASSERT_EQ(out.items[r].index, expected[r].index) << "user " << u << " rank " << r;
          ASSERT_EQ(out.items[r].score, expected[r].score);
        }
        for (size_t r = 1; r < expected.size(); ++r)
          lists_with_ties += expected[r].score == expected[r - 1].score;
        EXPECT_EQ(out.version, 3u);
        EXPECT_FALSE(out.folded_in);
        EXPECT_FALSE(out.fallback);
      }
    }
  }
  EXPECT_GT(lists_with_ties, 1000);  // the tie rule was really exercised
}

TEST(ScorerTest, CountBeyondTheCatalogueReturnsEveryNonExcludedItem) {
  const TestModel m = RandomModel(3, 50, 4, 10, 3, false);
  auto snap = BuildSnapshot(m, 1);
  Scorer scorer;
  RankedList out;
  RecommendQuery q;
  q.user_id = "member-1";
  q.count = 1000;
  q.exclude_seen = true;
  ASSERT_TRUE(scorer.Recommend(*snap, q, &out).ok());
  EXPECT_EQ(out.items.size(), 40u);
}

TEST(ScorerTest, UnknownUserWithoutRecentItemsIsNotFoundNamingTheUser) {
  const TestModel m = RandomModel(3, 50, 4, 10, 3, false);
  auto snap = BuildSnapshot(m, 9);
  Scorer scorer;
  RankedList out;
  RecommendQuery q;
  q.user_id = "member-who-joined-today";
  q.count = 5;
  Status s = scorer.Recommend(*snap, q, &out);
  EXPECT_TRUE(s.IsNotFound());
  EXPECT_NE(s.message().find("user_id 'member-who-joined-today'"), std::string::npos)
      << s.message();
  EXPECT_NE(s.message().find("version 9"), std::string::npos) << s.message();

  // Recent ids none of which the model knows: still NotFound, and the message says why.
  std::vector<std::string_view> recent = {"tool-unheard-of"};
  q.recent_item_ids = recent;
  s = scorer.Recommend(*snap, q, &out);
  EXPECT_TRUE(s.IsNotFound());
  EXPECT_NE(s.message().find("none of its 1 recent_item_ids"), std::string::npos) << s.message();
}

TEST(ScorerTest, MostInteractedFallbackIsTheDegreeOrderLessExclusions) {
  TestModel m = RandomModel(10, 60, 4, 0, 3, false);
  for (uint32_t i = 0; i < m.num_items; ++i) m.degrees[i] = (i * 7) % 13;  // many equal degrees
  auto snap = BuildSnapshot(m, 2);
  Scorer scorer;
  RankedList out;
  // tool-11 and tool-37 have the top degree, 12 (11·7 = 77 ≡ 12 mod 13).
  std::vector<std::string_view> exclude = {"tool-11", "tool-37"};
  RecommendQuery q;
  q.user_id = "member-unknown";
  q.count = 10;
  q.exclude_item_ids = exclude;
  q.unknown_user = UnknownUserPolicy::kMostInteracted;
  ASSERT_TRUE(scorer.Recommend(*snap, q, &out).ok());
  EXPECT_TRUE(out.fallback);
  EXPECT_FALSE(out.folded_in);
  // Expected by hand: sort (degree desc, index asc), drop the exclusions, keep 10.
  std::vector<uint32_t> order(m.num_items);
  std::iota(order.begin(), order.end(), 0u);
  std::stable_sort(order.begin(), order.end(),
                   [&](uint32_t a, uint32_t b) { return m.degrees[a] > m.degrees[b]; });
  std::vector<uint32_t> expected;
  for (uint32_t i : order)
    if (i != 11 && i != 37 && expected.size() < 10) expected.push_back(i);
  ASSERT_EQ(out.items.size(), 10u);
  for (size_t r = 0; r < 10; ++r) {
    EXPECT_EQ(out.items[r].index, expected[r]);
    EXPECT_EQ(out.items[r].score, static_cast<float>(m.degrees[expected[r]]));
  }
}

TEST(ScorerTest, FoldedInUserNeverGetsTheirRecentItemsBack) {
  const TestModel m = RandomModel(5, 300, 8, 0, 4, false);
  auto snap = BuildSnapshot(m, 1);
  Scorer scorer;
  RankedList out;
  std::vector<std::string_view> recent = {"tool-3", "tool-77", "tool-150", "tool-nope"};
  std::vector<std::string_view> exclude = {"tool-5"};
  RecommendQuery q;
  q.user_id = "member-new";
  q.count = 300;
  q.recent_item_ids = recent;
  q.exclude_item_ids = exclude;
  ASSERT_TRUE(scorer.Recommend(*snap, q, &out).ok());
  EXPECT_TRUE(out.folded_in);
  EXPECT_EQ(out.items.size(), 300u - 4u);  // three known recent items and one exclusion
  for (const ScoredIndex& s : out.items) {
    EXPECT_NE(s.index, 3u);
    EXPECT_NE(s.index, 77u);
    EXPECT_NE(s.index, 150u);
    EXPECT_NE(s.index, 5u);
  }
}

TEST(ScorerTest, RecentItemsAreIgnoredForKnownUsers) {
  const TestModel m = RandomModel(5, 100, 8, 0, 4, false);
  auto snap = BuildSnapshot(m, 1);
  Scorer scorer;
  RankedList with, without;
  std::vector<std::string_view> recent = {"tool-1", "tool-2"};
  RecommendQuery q;
  q.user_id = "member-4";
  q.count = 20;
  ASSERT_TRUE(scorer.Recommend(*snap, q, &without).ok());
  q.recent_item_ids = recent;
  ASSERT_TRUE(scorer.Recommend(*snap, q, &with).ok());
  EXPECT_FALSE(with.folded_in);
  EXPECT_EQ(with.items, without.items);
}

TEST(ScorerTest, RankCandidatesScoresKnownOnesOnceAndReportsUnknownOnesInOrder) {
  const TestModel m = RandomModel(4, 100, 8, 0, 6, false);
  auto snap = BuildSnapshot(m, 1);
  Scorer scorer;
  RankedList out;
  std::vector<std::string_view> candidates = {"tool-9", "tool-x", "tool-40", "tool-9",
                                              "tool-y", "tool-x", "tool-0",  "tool-99"};
  CandidatesQuery q;
  q.user_id = "member-2";
  q.candidate_item_ids = candidates;
  ASSERT_TRUE(scorer.RankCandidates(*snap, q, &out).ok());
  ASSERT_EQ(out.items.size(), 4u);  // 9, 40, 0, 99, each once
  std::set<uint32_t> got;
  for (size_t r = 0; r < out.items.size(); ++r) {
    got.insert(out.items[r].index);
    EXPECT_FLOAT_EQ(out.items[r].score, Dot(m.user(2), m.item(out.items[r].index)));
    if (r > 0) {
      EXPECT_GE(out.items[r - 1].score, out.items[r].score);
    }
  }
  EXPECT_EQ(got, (std::set<uint32_t>{0, 9, 40, 99}));
  // Unknown: positions of the first "tool-x" and of "tool-y", in request order.
  EXPECT_EQ(out.unknown_candidates, (std::vector<uint32_t>{1, 4}));

  q.user_id = "member-unknown";
  EXPECT_TRUE(scorer.RankCandidates(*snap, q, &out).IsNotFound());
  std::vector<std::string_view> recent = {"tool-5"};
  q.recent_item_ids = recent;
  ASSERT_TRUE(scorer.RankCandidates(*snap, q, &out).ok());
  EXPECT_TRUE(out.folded_in);
  EXPECT_EQ(out.items.size(), 4u);
}

TEST(ScorerTest, SimilarItemsFollowsBruteForceCosineAndNeverReturnsTheQuery) {
  const TestModel m = RandomModel(2, 400, 12, 0, 8, false);
  auto snap = BuildSnapshot(m, 1);
  Scorer scorer;
  RankedList out;
  for (uint32_t query : {0u, 17u, 399u}) {
    std::vector<std::string> ex_storage = {"tool-" + std::to_string((query + 1) % 400)};
    std::vector<std::string_view> exclude(ex_storage.begin(), ex_storage.end());
    SimilarQuery q;
    q.item_id = m.item_ids[query];
    q.count = 400;
    q.exclude_item_ids = exclude;
    ASSERT_TRUE(scorer.SimilarItems(*snap, q, &out).ok());
    ASSERT_EQ(out.items.size(), 398u);  // all but the query and the exclusion
    // Brute force in double precision.
    auto cosine = [&](uint32_t i) {
      double dot = 0, na = 0, nb = 0;
      for (uint32_t k = 0; k < m.dim; ++k) {
        dot += double{m.item(query)[k]} * m.item(i)[k];
        na += double{m.item(query)[k]} * m.item(query)[k];
        nb += double{m.item(i)[k]} * m.item(i)[k];
      }
      return dot / std::sqrt(na * nb);
    };
    std::vector<double> expected;
    for (uint32_t i = 0; i < m.num_items; ++i)
      if (i != query && i != (query + 1) % 400) expected.push_back(cosine(i));
    std::sort(expected.rbegin(), expected.rend());
    for (size_t r = 0; r < out.items.size(); ++r) {
      EXPECT_NE(out.items[r].index, query);
      EXPECT_NE(out.items[r].index, (query + 1) % 400);
      // Rank by rank, the scores agree with the exact ordering up to float rounding.
      EXPECT_NEAR(out.items[r].score, expected[r], 1e-5) << "rank " << r;
      EXPECT_NEAR(out.items[r].score, cosine(out.items[r].index), 1e-5);
    }
  }
  SimilarQuery q;
  q.item_id = "tool-missing";
  q.count = 3;
  Status s = scorer.SimilarItems(*snap, q, &out);
  EXPECT_TRUE(s.IsNotFound());
  EXPECT_NE(s.message().find("item_id 'tool-missing'"), std::string::npos);
}

TEST(ScorerTest, SimilarItemsToAZeroVectorIsAFailedPrecondition) {
  TestModel m = RandomModel(2, 20, 4, 0, 8, false);
  std::fill(m.items.begin() + 4 * 7, m.items.begin() + 4 * 8, 0.0f);
  auto snap = BuildSnapshot(m, 1);
  Scorer scorer;
  RankedList out;
  SimilarQuery q;
  q.item_id = "tool-7";
  q.count = 3;
  EXPECT_EQ(scorer.SimilarItems(*snap, q, &out).code(), Status::Code::kFailedPrecondition);
}

TEST(ScorerTest, APassedDeadlineAbortsAndAFutureOneDoesNot) {
  const TestModel m = RandomModel(2, 5000, 16, 0, 8, false);
  auto snap = BuildSnapshot(m, 1);
  Scorer scorer;
  RankedList out;
  RecommendQuery q;
  q.user_id = "member-0";
  q.count = 10;
  q.deadline = std::chrono::system_clock::now() - std::chrono::milliseconds(1);
  Status s = scorer.Recommend(*snap, q, &out);
  EXPECT_EQ(s.code(), Status::Code::kAborted);
  EXPECT_NE(s.message().find("deadline"), std::string::npos);
  SimilarQuery sq;
  sq.item_id = "tool-0";
  sq.count = 10;
  sq.deadline = q.deadline;
  EXPECT_EQ(scorer.SimilarItems(*snap, sq, &out).code(), Status::Code::kAborted);

  q.deadline = std::chrono::system_clock::now() + std::chrono::hours(1);
  EXPECT_TRUE(scorer.Recommend(*snap, q, &out).ok());
  EXPECT_EQ(out.items.size(), 10u);
}

}  // namespace
}  // namespace plumb::server

namespace plumb::server {
namespace {

// Withdrawn items (WithdrawnItems) are left out of Recommend and SimilarItems exactly as if the
// request had excluded them (brute force with those rows excluded by hand), and RankCandidates
// reports them instead of scoring them. Both the set's own bitmap (built for the snapshot) and
// the fallback for a set built for another version (the instant after a swap) are checked.
TEST(ScorerTest, WithdrawnItemsAreNeverServedWhetherTheSetWasBuiltForTheSnapshotOrNot) {
  const TestModel m = RandomModel(6, 500, 8, 20, /*seed=*/21, /*small_integers=*/false);
  auto snap = BuildSnapshot(m, 4);
  Scorer scorer;
  RankedList out;
  std::vector<std::string> ids = {"tool-3", "tool-77", "tool-499", "tool-not-yet-known"};
  const std::set<uint32_t> withdrawn_rows = {3, 77, 499};
  WithdrawnItems for_snapshot(ids, 1, snap.get());
  WithdrawnItems for_other_version(ids, 1, nullptr);
  ASSERT_TRUE(for_snapshot.BuiltFor(4));
  ASSERT_FALSE(for_other_version.BuiltFor(4));
  EXPECT_EQ(for_snapshot.size(), 4u);

  for (const WithdrawnItems* set : {&for_snapshot, &for_other_version}) {
    for (uint32_t u = 0; u < m.num_users; ++u) {
      std::vector<std::string_view> exclude = {"tool-10"};
      RecommendQuery q;
      q.user_id = m.user_ids[u];
      q.count = 500;
      q.exclude_seen = true;
      q.exclude_item_ids = exclude;
      q.withdrawn = set;
      ASSERT_TRUE(scorer.Recommend(*snap, q, &out).ok());
      std::set<uint32_t> excluded(m.seen[u].begin(), m.seen[u].end());
      excluded.insert(10);
      excluded.insert(withdrawn_rows.begin(), withdrawn_rows.end());
      const auto expected = BruteForce(m, m.user(u), excluded, 500);
      ASSERT_EQ(out.items.size(), expected.size());
      for (size_t r = 0; r < expected.size(); ++r) {
        ASSERT_EQ(out.items[r].index, expected[r].index) << "user " << u << " rank " << r;
      }
    }
    // The most-interacted fallback leaves them out too.
    RecommendQuery fallback;
    fallback.user_id = "member-unknown";
    fallback.count = 500;
    fallback.unknown_user = UnknownUserPolicy::kMostInteracted;
    fallback.withdrawn = set;
    ASSERT_TRUE(scorer.Recommend(*snap, fallback, &out).ok());
    EXPECT_EQ(out.items.size(), 497u);
    for (const ScoredIndex& s : out.items) EXPECT_FALSE(withdrawn_rows.count(s.index));

    // SimilarItems: all but the query and the withdrawn; a withdrawn item may be the query.
    for (const char* query : {"tool-5", "tool-77"}) {
      SimilarQuery q;
      q.item_id = query;
      q.count = 500;
      q.withdrawn = set;
      ASSERT_TRUE(scorer.SimilarItems(*snap, q, &out).ok());
      EXPECT_EQ(out.items.size(), std::string(query) == "tool-5" ? 496u : 497u);
      for (const ScoredIndex& s : out.items) EXPECT_FALSE(withdrawn_rows.count(s.index));
    }

    // RankCandidates: the withdrawn known candidates are reported by request position (first
    // occurrence), unknown ones as before, the rest scored.
    std::vector<std::string_view> candidates = {"tool-77", "tool-8", "tool-not-yet-known",
                                                "tool-3",  "tool-77", "tool-9"};
    CandidatesQuery c;
    c.user_id = "member-1";
    c.candidate_item_ids = candidates;
    c.withdrawn = set;
    ASSERT_TRUE(scorer.RankCandidates(*snap, c, &out).ok());
    std::set<uint32_t> scored;
    for (const ScoredIndex& s : out.items) scored.insert(s.index);
    EXPECT_EQ(scored, (std::set<uint32_t>{8, 9}));
    EXPECT_EQ(out.unavailable_candidates, (std::vector<uint32_t>{0, 3}));
    EXPECT_EQ(out.unknown_candidates, (std::vector<uint32_t>{2}));
  }

  // An empty set changes nothing.
  WithdrawnItems none({}, 2, snap.get());
  RecommendQuery q;
  q.user_id = "member-0";
  q.count = 500;
  q.exclude_seen = false;
  q.withdrawn = &none;
  ASSERT_TRUE(scorer.Recommend(*snap, q, &out).ok());
  EXPECT_EQ(out.items.size(), 500u);
}

}  // namespace
}  // namespace plumb::server
