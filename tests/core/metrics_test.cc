#include "core/metrics.h"

#include <gtest/gtest.h>

#include <cmath>
#include <limits>
#include <random>
#include <vector>

namespace plumb {
namespace {

using Items = std::vector<uint32_t>;

TEST(RecallNdcgTest, HandWorkedExample) {
  // ranked = [5, 2, 9, 1, 7], relevant = {1, 2, 3}.
  // Hits: item 2 at rank 2 and item 1 at rank 4.
  // k = 5: recall = 2 / |relevant| = 2/3.
  //        DCG  = 1/log2(2+1) + 1/log2(4+1) = 0.630930 + 0.430677 = 1.061606
  //        IDCG = min(5, 3) = 3 hits at ranks 1..3 = 1 + 0.630930 + 0.5 = 2.130930
  //        NDCG = 1.061606 / 2.130930 = 0.498189
  // k = 3: only item 2 (rank 2) hits: recall = 1/3, NDCG = 0.630930 / 2.130930 = 0.296082
  // k = 2: recall = 1/3; IDCG over min(2, 3) = 2 ranks = 1.630930, NDCG = 0.386853
  // Binary-gain NDCG per Järvelin & Kekäläinen (2002), log2(rank + 1) discount.
  const Items ranked = {5, 2, 9, 1, 7};
  const Items relevant = {1, 2, 3};
  EXPECT_DOUBLE_EQ(recall_at_k(ranked, relevant, 5), 2.0 / 3.0);
  EXPECT_NEAR(ndcg_at_k(ranked, relevant, 5), 0.498189257, 1e-9);
  EXPECT_DOUBLE_EQ(recall_at_k(ranked, relevant, 3), 1.0 / 3.0);
  EXPECT_NEAR(ndcg_at_k(ranked, relevant, 3), 0.296081911, 1e-9);
  EXPECT_DOUBLE_EQ(recall_at_k(ranked, relevant, 2), 1.0 / 3.0);
  EXPECT_NEAR(ndcg_at_k(ranked, relevant, 2), 0.386852807, 1e-9);
}

TEST(RecallNdcgTest, EdgeCases) {
  const Items relevant = {4, 8};
  // Perfect ranking: NDCG 1; recall 1 once both are inside the cut-off.
  EXPECT_DOUBLE_EQ(ndcg_at_k(Items{8, 4, 1}, relevant, 3), 1.0);
  EXPECT_DOUBLE_EQ(recall_at_k(Items{8, 4, 1}, relevant, 3), 1.0);
  // Recall divides by |relevant| (not min(k, |relevant|)): one slot, one hit, recall 1/2.
  EXPECT_DOUBLE_EQ(recall_at_k(Items{8, 4}, relevant, 1), 0.5);
  EXPECT_DOUBLE_EQ(ndcg_at_k(Items{8, 4}, relevant, 1), 1.0);
  // A list shorter than k: missing slots are misses.
  EXPECT_DOUBLE_EQ(recall_at_k(Items{4}, relevant, 10), 0.5);
  EXPECT_NEAR(ndcg_at_k(Items{4}, relevant, 10), 1.0 / (1.0 + 1.0 / std::log2(3.0)), 1e-12);
  // No hits, no relevant items, k = 0.
  EXPECT_EQ(ndcg_at_k(Items{1, 2}, relevant, 2), 0.0);
  EXPECT_EQ(recall_at_k(Items{1, 2}, Items{}, 2), 0.0);
  EXPECT_EQ(ndcg_at_k(Items{1, 2}, Items{}, 2), 0.0);
  EXPECT_EQ(ndcg_at_k(Items{4, 8}, relevant, 0), 0.0);
}

TEST(PopularityTest, MeanPopularityAndArp) {
  const std::vector<uint64_t> degrees = {10, 0, 3, 7};
  // ARP per Abdollahpouri et al. (2019): mean over users of the mean training degree of
  // their top-k items. User 0 top-2 [0, 2] -> 6.5; user 1 top-2 [1, 3] -> 3.5;
  // user 2 has an empty list and is skipped. ARP = (6.5 + 3.5) / 2 = 5.
  ItemLists lists;
  lists.Append(Items{0, 2, 3});
  lists.Append(Items{1, 3});
  lists.Append(Items{});
  EXPECT_DOUBLE_EQ(mean_popularity(lists[0], degrees, 2), 6.5);
  EXPECT_DOUBLE_EQ(arp_at_k(lists, degrees, 2), 5.0);
  // Slot-weighted mean of served counts: counts [1, 1, 1, 1] over degrees -> 20 / 4 = 5.
  const auto counts = exposure_counts(lists, degrees.size(), 2);
  EXPECT_EQ(counts, (std::vector<uint64_t>{1, 1, 1, 1}));
  EXPECT_DOUBLE_EQ(weighted_mean_popularity(counts, degrees), 5.0);
  EXPECT_EQ(weighted_mean_popularity(std::vector<uint64_t>(4, 0), degrees), 0.0);
}

TEST(GiniTest, KnownCases) {
  // All equal -> 0; one holder of everything among n -> (n - 1) / n (sorted formula).
  EXPECT_DOUBLE_EQ(gini(std::vector<uint64_t>{5, 5, 5, 5}), 0.0);
  EXPECT_DOUBLE_EQ(gini(std::vector<uint64_t>{0, 0, 0, 12}), 3.0 / 4.0);
  EXPECT_DOUBLE_EQ(gini(std::vector<uint64_t>{0, 9, 0, 0, 0, 0, 0, 0, 0, 0}), 9.0 / 10.0);
  // [1, 2, 3, 4]: Σ(2i − n − 1)x = −3 − 2 + 3 + 12 = 10, n Σx = 40 -> 0.25. Cross-check
  // with the mean-absolute-difference form Σ_i Σ_j |x_i − x_j| / (2 n² mean) = 20 / 80 = 0.25.
  EXPECT_DOUBLE_EQ(gini(std::vector<uint64_t>{4, 2, 1, 3}), 0.25);
  EXPECT_EQ(gini(std::vector<uint64_t>{}), 0.0);
  EXPECT_EQ(gini(std::vector<uint64_t>{0, 0}), 0.0);
}

TEST(GiniTest, AgreesWithMeanAbsoluteDifferenceOnRandomCounts) {
  // Independent formula (exact algebra): G = Σ_i Σ_j |x_i − x_j| / (2 n Σx).
  std::mt19937_64 rng(3);
  for (int trial = 0; trial < 50; ++trial) {
    std::vector<uint64_t> x(1 + rng() % 60);
    for (auto& v : x) v = (rng() % 4 == 0) ? 0 : rng() % 1000;
    double mad = 0.0, sum = 0.0;
    for (auto a : x) {
      sum += static_cast<double>(a);
      for (auto b : x) mad += std::abs(static_cast<double>(a) - static_cast<double>(b));
    }
    const double expect = sum == 0 ? 0.0 : mad / (2.0 * static_cast<double>(x.size()) * sum);
    ASSERT_NEAR(gini(x), expect, 1e-12) << trial;
  }
}

TEST(CoverageTest, FractionOfItemsWithCounts) {
  EXPECT_DOUBLE_EQ(coverage(std::vector<uint64_t>{0, 3, 0, 1}), 0.5);
  EXPECT_EQ(coverage(std::vector<uint64_t>{}), 0.0);
}

TEST(JsDivergenceTest, HandWorkedValues) {
  const std::vector<double> p = {0.2, 0.3, 0.5};
  EXPECT_NEAR(js_divergence(p, p), 0.0, 1e-15);
  // Unnormalised weights are normalised first: {2, 3, 5} is the same distribution as p.
  EXPECT_NEAR(js_divergence(p, std::vector<double>{2, 3, 5}), 0.0, 1e-15);
  // Disjoint supports -> exactly 1 bit.
  EXPECT_DOUBLE_EQ(js_divergence(std::vector<double>{1, 0, 0}, std::vector<double>{0, 0.4, 0.6}),
                   1.0);
  // P = (1, 0), Q = (½, ½): M = (¾, ¼).
  // KL(P‖M) = log2(4/3) = 0.415037; KL(Q‖M) = ½ log2(2/3) + ½ log2(2) = 0.207519.
  // JS = ½ (0.415037 + 0.207519) = 0.311278.
  EXPECT_NEAR(js_divergence(std::vector<double>{1, 0}, std::vector<double>{0.5, 0.5}), 0.3112781245,
              1e-9);
  // Symmetric.
  const std::vector<double> a = {0.1, 0.6, 0.3}, b = {0.5, 0.25, 0.25};
  EXPECT_DOUBLE_EQ(js_divergence(a, b), js_divergence(b, a));
}

TEST(JsDivergenceTest, UndefinedInputsGiveNaN) {
  EXPECT_TRUE(std::isnan(js_divergence(std::vector<double>{1, 0}, std::vector<double>{1})));
  EXPECT_TRUE(std::isnan(js_divergence(std::vector<double>{0, 0}, std::vector<double>{1, 0})));
  EXPECT_TRUE(std::isnan(js_divergence(std::vector<double>{-1, 2}, std::vector<double>{1, 0})));
  EXPECT_TRUE(std::isnan(js_divergence(
      std::vector<double>{std::numeric_limits<double>::infinity(), 1}, std::vector<double>{1, 0})));
}

TEST(PopularityGroupsTest, EqualDegreeSumsOnHandExample) {
  // Degrees by item: 4 1 2 1 4 1 2 1 (S = 16), G = 4, target 4 per group.
  // Ascending (ties by index): items 1,3,5,7 (deg 1; running sums 1..4) -> group 0 (sum 4);
  // items 2,6 (deg 2; running 6, 8) -> group 1 (sum 4); item 0 (running 12) -> group 2;
  // item 4 (running 16) -> group 3. Every group sums to exactly 4.
  const std::vector<uint64_t> degrees = {4, 1, 2, 1, 4, 1, 2, 1};
  std::vector<uint32_t> groups;
  ASSERT_TRUE(popularity_groups(degrees, 4, &groups).ok());
  EXPECT_EQ(groups, (std::vector<uint32_t>{2, 0, 1, 0, 3, 0, 1, 0}));
  std::vector<uint64_t> sums(4, 0);
  for (std::size_t i = 0; i < degrees.size(); ++i) sums[groups[i]] += degrees[i];
  EXPECT_EQ(sums, (std::vector<uint64_t>(4, 4)));
  // Group shares of the training degrees themselves are then uniform.
  EXPECT_EQ(group_shares(degrees, groups, 4), (std::vector<double>(4, 0.25)));
}

TEST(PopularityGroupsTest, HeavyItemGoesToTopGroupAndEdgeCases) {
  // [1, 1, 10], G = 3, S = 12: running sums 1, 2 -> group 0; 12 -> ceil(3) − 1 = group 2.
  std::vector<uint32_t> groups;
  ASSERT_TRUE(popularity_groups(std::vector<uint64_t>{1, 10, 1}, 3, &groups).ok());
  EXPECT_EQ(groups, (std::vector<uint32_t>{0, 2, 0}));
  // Zero-degree items sit in group 0.
  ASSERT_TRUE(popularity_groups(std::vector<uint64_t>{0, 5, 0, 5}, 2, &groups).ok());
  EXPECT_EQ(groups, (std::vector<uint32_t>{0, 0, 0, 1}));
  // No training data: everything in group 0.
  ASSERT_TRUE(popularity_groups(std::vector<uint64_t>{0, 0, 0}, 3, &groups).ok());
  EXPECT_EQ(groups, (std::vector<uint32_t>{0, 0, 0}));
  EXPECT_EQ(popularity_groups(std::vector<uint64_t>{1}, 0, &groups).code(),
            Status::Code::kInvalidArgument);
}

TEST(PopularityGroupsTest, GroupsAreMonotoneInDegreeAndBalancedOnSkewedData) {
  std::mt19937_64 rng(8);
  // Zipf-like degrees, the usual shape of interaction data.
  std::vector<uint64_t> degrees(5000);
  for (std::size_t i = 0; i < degrees.size(); ++i) {
    degrees[i] = 1 + static_cast<uint64_t>(20000.0 / static_cast<double>(1 + rng() % 5000));
  }
  std::vector<uint32_t> groups;
  ASSERT_TRUE(popularity_groups(degrees, 5, &groups).ok());
  uint64_t total = 0, max_degree = 0;
  std::vector<uint64_t> sums(5, 0);
  for (std::size_t i = 0; i < degrees.size(); ++i) {
    sums[groups[i]] += degrees[i];
    total += degrees[i];
    max_degree = std::max(max_degree, degrees[i]);
    for (std::size_t j = 0; j < i; ++j) {
      if (degrees[j] < degrees[i]) {
        ASSERT_LE(groups[j], groups[i]);
      }
      if (degrees[j] > degrees[i]) {
        ASSERT_GE(groups[j], groups[i]);
      }
    }
  }
  // Each group's sum is within one item's degree of S/G (boundaries fall between items).
  for (uint64_t s : sums) {
    EXPECT_NEAR(static_cast<double>(s), static_cast<double>(total) / 5.0,
                static_cast<double>(max_degree));
  }
}

// Hand-worked, five groups (tail 0 .. head 4). Served p = (0.1, 0.1, 0.2, 0.3, 0.3), target
// q = (0.4, 0.3, 0.2, 0.1, 0.0). Mean group index: E_p = 0.1*0 + 0.1*1 + 0.2*2 + 0.3*3 + 0.3*4
// = 2.6; E_q = 0.3 + 0.4 + 0.3 = 1.0; shift = (2.6 - 1.0) / 4 = 0.4 (toward the head:
// under-corrected). Cumulative P = 0.1, 0.2, 0.4, 0.7; Q = 0.4, 0.7, 0.9, 1.0; the differences
// 0.3 + 0.5 + 0.5 + 0.3 = 1.6, / 4 = 0.4: the curves do not cross, so distance = |shift|.
TEST(GroupShareShiftTest, HandWorkedFiveGroups) {
  const std::vector<double> p = {0.1, 0.1, 0.2, 0.3, 0.3}, q = {0.4, 0.3, 0.2, 0.1, 0.0};
  GroupShift s = group_share_shift(p, q);
  EXPECT_NEAR(s.shift, 0.4, 1e-12);
  EXPECT_NEAR(s.distance, 0.4, 1e-12);
  // Swapped: the same distance, the opposite sign (over-corrected toward the tail).
  s = group_share_shift(q, p);
  EXPECT_NEAR(s.shift, -0.4, 1e-12);
  EXPECT_NEAR(s.distance, 0.4, 1e-12);
  // Unnormalised weights give the same figures (counts instead of shares).
  const std::vector<double> counts = {10, 10, 20, 30, 30};
  EXPECT_NEAR(group_share_shift(counts, q).shift, 0.4, 1e-12);
}

// Crossing curves: p = (0.5, 0, 0, 0, 0.5) against q uniform (0.2 each). The means agree
// (2.0 each), so shift = 0, but the distributions differ: P = 0.5, 0.5, 0.5, 0.5; Q = 0.2, 0.4,
// 0.6, 0.8; |P - Q| = 0.3 + 0.1 + 0.1 + 0.3 = 0.8, / 4 = 0.2.
TEST(GroupShareShiftTest, CrossingCurvesHaveZeroShiftButADistance) {
  const std::vector<double> p = {0.5, 0, 0, 0, 0.5}, q(5, 0.2);
  const GroupShift s = group_share_shift(p, q);
  EXPECT_NEAR(s.shift, 0.0, 1e-12);
  EXPECT_NEAR(s.distance, 0.2, 1e-12);
  EXPECT_EQ(group_share_shift(q, q).distance, 0.0);
}

TEST(GroupShareShiftTest, UndefinedInputsGiveNaN) {
  const std::vector<double> a = {0.5, 0.5}, b = {1.0, 0.0, 0.0}, zero = {0.0, 0.0};
  EXPECT_TRUE(std::isnan(group_share_shift(a, b).shift));
  EXPECT_TRUE(std::isnan(group_share_shift(a, zero).distance));
  EXPECT_TRUE(
      std::isnan(group_share_shift(std::vector<double>{1.0}, std::vector<double>{1.0}).shift));
  EXPECT_TRUE(std::isnan(group_share_shift(std::vector<double>{-1.0, 2.0}, a).shift));
}

// Random distributions: |shift| <= distance always, and shift equals the summation-by-parts
// form (1 / (G-1)) sum_g (Q(g) - P(g)).
TEST(GroupShareShiftTest, ShiftIsBoundedByDistanceOnRandomInputs) {
  std::mt19937 rng(7);
  std::uniform_real_distribution<double> u(0.0, 1.0);
  for (int trial = 0; trial < 200; ++trial) {
    const size_t G = 2 + trial % 7;
    std::vector<double> p(G), q(G);
    for (size_t g = 0; g < G; ++g) p[g] = u(rng), q[g] = u(rng);
    const GroupShift s = group_share_shift(p, q);
    EXPECT_LE(std::abs(s.shift), s.distance + 1e-12);
    double sp = 0, sq = 0, cp = 0, cq = 0, by_parts = 0;
    for (size_t g = 0; g < G; ++g) sp += p[g], sq += q[g];
    for (size_t g = 0; g + 1 < G; ++g) {
      cp += p[g] / sp;
      cq += q[g] / sq;
      by_parts += cq - cp;
    }
    EXPECT_NEAR(s.shift, by_parts / static_cast<double>(G - 1), 1e-12);
  }
}

TEST(RankingReportTest, HandWorkedReport) {
  // Catalogue: degrees [1, 1, 2, 4] (S = 8). G = 2: running sums 1, 2, 4 -> group 0,
  // 8 -> group 1. So group 0 = {0, 1, 2}, group 1 = {3}. k = 2.
  //   user 0: top [3, 0, 1], relevant {0}: top-2 [3, 0], hit at rank 2.
  //           recall 1/1; NDCG = (1/log2 3) / 1 = 0.630930.
  //   user 1: relevant {} -> skipped everywhere.
  //   user 2: top [2, 3, 1], relevant {1, 3}: top-2 [2, 3], hit at rank 2.
  //           recall 1/2; NDCG = 0.630930 / (1 + 0.630930) = 0.386853.
  // recall = 0.75; NDCG = 0.508891; ARP = ((4+1)/2 + (2+4)/2) / 2 = 2.75.
  // Exposure counts [1, 0, 1, 2]: Gini = (−3·0 − 1·1 + 1·1 + 3·2) / (4·4) = 0.375;
  // coverage 3/4. Recommended slots per group: [2, 2] -> [½, ½]. Test interactions:
  // items 0, 1, 3 -> [2, 1] -> [⅔, ⅓].
  ItemLists top, rel;
  top.Append(Items{3, 0, 1});
  rel.Append(Items{0});
  top.Append(Items{3, 2, 0});
  rel.Append(Items{});
  top.Append(Items{2, 3, 1});
  rel.Append(Items{1, 3});
  const std::vector<uint64_t> degrees = {1, 1, 2, 4};
  RankingReport r;
  ASSERT_TRUE(build_ranking_report(top, rel, degrees, 2, 2, &r).ok());
  EXPECT_EQ(r.k, 2u);
  EXPECT_EQ(r.users_evaluated, 2u);
  EXPECT_DOUBLE_EQ(r.recall, 0.75);
  EXPECT_NEAR(r.ndcg, (0.6309297535714575 + 0.38685280723454163) / 2.0, 1e-12);
  EXPECT_DOUBLE_EQ(r.arp, 2.75);
  EXPECT_DOUBLE_EQ(r.gini, 0.375);
  EXPECT_DOUBLE_EQ(r.coverage, 0.75);
  EXPECT_EQ(r.rec_group_shares, (std::vector<double>{0.5, 0.5}));
  ASSERT_EQ(r.test_group_shares.size(), 2u);
  EXPECT_DOUBLE_EQ(r.test_group_shares[0], 2.0 / 3.0);
  EXPECT_DOUBLE_EQ(r.test_group_shares[1], 1.0 / 3.0);
  // JS between (½, ½) and (⅔, ⅓), M = (7/12, 5/12), written out term by term.
  const double js = 0.5 * (0.5 * std::log2(6.0 / 7.0) + 0.5 * std::log2(6.0 / 5.0)) +
                    0.5 * (2.0 / 3.0 * std::log2(8.0 / 7.0) + 1.0 / 3.0 * std::log2(4.0 / 5.0));
  EXPECT_NEAR(r.group_share_js, js, 1e-12);
}

TEST(RankingReportTest, RejectsInvalidInputAndLeavesOutputAlone) {
  const std::vector<uint64_t> degrees = {1, 1, 2, 4};
  RankingReport r;
  r.users_evaluated = 77;
  ItemLists top, rel;
  top.Append(Items{0, 1});
  rel.Append(Items{3, 1});  // not ascending
  EXPECT_EQ(build_ranking_report(top, rel, degrees, 2, 2, &r).code(),
            Status::Code::kInvalidArgument);
  rel.Clear();
  rel.Append(Items{9});  // outside the catalogue
  EXPECT_EQ(build_ranking_report(top, rel, degrees, 2, 2, &r).code(),
            Status::Code::kInvalidArgument);
  rel.Clear();
  rel.Append(Items{1});
  EXPECT_EQ(build_ranking_report(top, rel, degrees, 0, 2, &r).code(),
            Status::Code::kInvalidArgument);
  ItemLists two;
  two.Append(Items{});
  two.Append(Items{});
  EXPECT_EQ(build_ranking_report(top, two, degrees, 2, 2, &r).code(),
            Status::Code::kInvalidArgument);
  EXPECT_EQ(r.users_evaluated, 77u);
}

}  // namespace
}  // namespace plumb
