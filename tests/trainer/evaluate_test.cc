#include "trainer/evaluate.h"

#include <gtest/gtest.h>

#include <algorithm>
#include <cmath>
#include <vector>

#include "core/metrics.h"
#include "tests/trainer/test_models.h"

namespace plumb::trainer {
namespace {

using testing::RandomData;
using testing::RandomModel;

// Hand-worked: one user (1, 0) and items j = (j, 0), so item j scores j. Item 5 is a
// training item and must be skipped, so the top-2 list is [4, 3]. Test items {0, 3}:
// Recall@2 = 1/2; NDCG@2 (binary gains, log2(rank + 1) discount; Järvelin & Kekäläinen
// 2002) = (1/log2 3) / (1 + 1/log2 3).
TEST(Evaluate, HandWorkedExample) {
  RowMatrix users(1, 2), items(6, 2);
  users << 1, 0;
  for (int j = 0; j < 6; ++j) items.row(j) << static_cast<float>(j), 0;
  Embeddings m;
  ASSERT_TRUE(Embeddings::FromMatrices(users, items, 1, &m).ok());
  Interactions train;
  ASSERT_TRUE(train.EnsureShape(1, 6).ok());
  ASSERT_TRUE(train.Add(0, 5).ok());
  const std::vector<Pair> test{{0, 3}, {0, 0}};
  EvalOptions o;
  o.k = 2;
  o.num_groups = 2;
  RankingReport r;
  ASSERT_TRUE(EvaluateModel(m, train, test, o, &r).ok());
  EXPECT_EQ(r.users_evaluated, 1u);
  EXPECT_DOUBLE_EQ(r.recall, 0.5);
  const double d2 = 1.0 / std::log2(3.0);
  EXPECT_NEAR(r.ndcg, d2 / (1.0 + d2), 1e-12);
  EXPECT_DOUBLE_EQ(r.arp, 0.0);  // items 4 and 3 have no training interactions
  EXPECT_DOUBLE_EQ(r.coverage, 2.0 / 6.0);
}

// Against brute force: full sort of every user's scores without training items, then core's
// metrics on those lists. Also: two threads give the same report as one, and the generic
// scorer path agrees with the model path.
TEST(Evaluate, MatchesBruteForceAndIsThreadCountInvariant) {
  const Interactions train = RandomData(70, 90, 0.05, 3);
  const Embeddings m = RandomModel(8, 70, 90, 4);
  std::vector<Pair> test;
  Rng rng(5);
  for (uint32_t u = 0; u < 70; u += 2) {
    for (int n = 0; n < 4; ++n) test.push_back(Pair{u, static_cast<uint32_t>(rng.Uniform(90))});
  }
  test.push_back(train.pair(0));  // a training pair in the test set is ignored
  EvalOptions o;
  o.k = 10;
  RankingReport one, two, generic;
  ASSERT_TRUE(EvaluateModel(m, train, test, o, &one).ok());
  o.threads = 2;
  ASSERT_TRUE(EvaluateModel(m, train, test, o, &two).ok());
  ASSERT_TRUE(EvaluateScorer(
                  [&](uint32_t u, std::span<float> s) {
                    for (uint32_t i = 0; i < 90; ++i) s[i] = m.Score(u, i);
                  },
                  90, train, test, o, &generic)
                  .ok());

  ItemLists top, relevant;
  for (uint32_t u = 0; u < 70; ++u) {
    std::vector<uint32_t> rel;
    for (const Pair& p : test) {
      if (p.user == u && !train.Contains(u, p.item)) rel.push_back(p.item);
    }
    std::sort(rel.begin(), rel.end());
    rel.erase(std::unique(rel.begin(), rel.end()), rel.end());
    if (rel.empty()) continue;
    std::vector<uint32_t> cand;
    for (uint32_t i = 0; i < 90; ++i) {
      if (!train.Contains(u, i)) cand.push_back(i);
    }
    std::sort(cand.begin(), cand.end(), [&](uint32_t a, uint32_t b) {
      const float sa = m.Score(u, a), sb = m.Score(u, b);
      return sa > sb || (sa == sb && a < b);
    });
    cand.resize(10);
    top.Append(cand);
    relevant.Append(rel);
  }
  std::vector<uint64_t> deg(90);
  for (uint32_t i = 0; i < 90; ++i) deg[i] = train.item_degree(i);
  RankingReport want;
  ASSERT_TRUE(build_ranking_report(top, relevant, deg, 10, 5, &want).ok());
  for (const RankingReport* r : {&one, &two, &generic}) {
    EXPECT_EQ(r->users_evaluated, want.users_evaluated);
    EXPECT_NEAR(r->recall, want.recall, 1e-12);
    EXPECT_NEAR(r->ndcg, want.ndcg, 1e-12);
    EXPECT_NEAR(r->arp, want.arp, 1e-9);
    EXPECT_NEAR(r->gini, want.gini, 1e-12);
    EXPECT_NEAR(r->coverage, want.coverage, 1e-12);
    EXPECT_EQ(r->rec_group_shares, want.rec_group_shares);
    EXPECT_EQ(r->test_group_shares, want.test_group_shares);
  }
  EXPECT_GT(want.recall, 0.0);
}

TEST(Evaluate, RejectsBadInput) {
  const Interactions train = RandomData(5, 5, 0.3, 1);
  const Embeddings m = RandomModel(4, 5, 5, 1);
  RankingReport r;
  EvalOptions o;
  const std::vector<Pair> outside{{7, 1}};
  EXPECT_EQ(EvaluateModel(m, train, outside, o, &r).code(), Status::Code::kInvalidArgument);
  o.k = 0;
  EXPECT_EQ(EvaluateModel(m, train, {}, o, &r).code(), Status::Code::kInvalidArgument);
}

}  // namespace
}  // namespace plumb::trainer
