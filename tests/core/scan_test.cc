#include "core/scan.h"

#include <gtest/gtest.h>

#include <algorithm>
#include <cmath>
#include <limits>
#include <random>
#include <vector>

namespace plumb {
namespace {

// A selector's result, sorted, as a vector (to compare two selections).
std::vector<ScoredIndex> Sorted(TopKSelector& selector) {
  const std::span<const ScoredIndex> result = selector.SortedResult();
  return {result.begin(), result.end()};
}

// Random matrix whose entries are small multiples of 1/4: the dot products of such values
// are exact in float32 for the dimensions used here, so equal scores (ties) occur often and
// any summation order gives the same float. That lets the brute-force reference use a plain
// double loop while the comparison stays exact.
ItemMatrix QuantisedMatrix(std::size_t rows, std::size_t dim, std::mt19937_64& rng) {
  ItemMatrix m(rows, dim);
  for (std::size_t r = 0; r < rows; ++r)
    for (auto& v : m.mutable_row(r))
      v = static_cast<float>(static_cast<int>(rng() % 5) - 2) * 0.25f;
  return m;
}

std::vector<float> QuantisedQuery(std::size_t dim, std::mt19937_64& rng) {
  std::vector<float> q(dim);
  for (auto& v : q) v = static_cast<float>(static_cast<int>(rng() % 3) - 1) * 0.5f;
  return q;
}

double NaiveDot(std::span<const float> a, std::span<const float> b) {
  double s = 0.0;
  for (std::size_t i = 0; i < a.size(); ++i) s += double{a[i]} * double{b[i]};
  return s;
}

// Brute force: score every row, drop excluded, full sort by (score desc, index asc), first k.
std::vector<ScoredIndex> BruteForce(const ItemMatrix& m, const std::vector<float>& q,
                                    const std::vector<bool>& excluded, std::size_t k) {
  std::vector<ScoredIndex> all;
  for (std::size_t r = 0; r < m.rows(); ++r) {
    if (excluded[r]) continue;
    all.push_back({static_cast<uint32_t>(r), static_cast<float>(NaiveDot(m.row(r), q))});
  }
  std::sort(all.begin(), all.end(), ranks_before);
  if (all.size() > k) all.resize(k);
  return all;
}

TEST(DotScoresTest, MatchesDoublePrecisionDotForManyDimensions) {
  std::mt19937_64 rng(11);
  std::normal_distribution<float> normal(0.0f, 1.0f);
  for (std::size_t dim : {1u, 3u, 7u, 8u, 9u, 16u, 31u, 64u, 100u}) {
    const std::size_t rows = 37;  // not a multiple of the 4-row kernel
    ItemMatrix m(rows, dim);
    for (std::size_t r = 0; r < rows; ++r)
      for (auto& v : m.mutable_row(r)) v = normal(rng);
    std::vector<float> q(dim);
    for (auto& v : q) v = normal(rng);
    std::vector<float> scores(rows);
    ASSERT_TRUE(dot_scores(m.view(), q, scores).ok());
    for (std::size_t r = 0; r < rows; ++r) {
      const double exact = NaiveDot(m.row(r), q);
      // float32 accumulation error bound ~ dim · eps · Σ|a_i b_i| (Higham, ch. 3).
      double abs_sum = 0.0;
      for (std::size_t d = 0; d < dim; ++d) abs_sum += std::abs(double{m.row(r)[d]} * q[d]);
      const double bound = static_cast<double>(dim) * 1.2e-7 * abs_sum + 1e-30;
      ASSERT_NEAR(scores[r], exact, bound) << "dim " << dim << " row " << r;
    }
    // Gathered scores are the same arithmetic, bit for bit.
    std::vector<uint32_t> pick = {36, 0, 5, 5, 17};
    std::vector<float> gathered(pick.size());
    ASSERT_TRUE(gather_dot_scores(m.view(), pick, q, gathered).ok());
    for (std::size_t j = 0; j < pick.size(); ++j) ASSERT_EQ(gathered[j], scores[pick[j]]);
  }
}

TEST(DotScoresTest, RejectsBadShapesWithoutWriting) {
  ItemMatrix m(4, 3);
  std::vector<float> q(2), scores(4, 9.0f);
  EXPECT_EQ(dot_scores(m.view(), q, scores).code(), Status::Code::kInvalidArgument);
  q.resize(3);
  std::vector<float> small(3, 9.0f);
  EXPECT_EQ(dot_scores(m.view(), q, small).code(), Status::Code::kInvalidArgument);
  EXPECT_EQ(small[0], 9.0f);
  std::vector<uint32_t> bad_rows = {1, 4};
  EXPECT_EQ(gather_dot_scores(m.view(), bad_rows, q, scores).code(),
            Status::Code::kInvalidArgument);
  EXPECT_EQ(scores[0], 9.0f);
}

TEST(TopKByDotTest, ExactAgainstBruteForceWithTiesExclusionsAndLargeK) {
  std::mt19937_64 rng(2024);
  for (int trial = 0; trial < 200; ++trial) {
    const std::size_t rows = rng() % 3000;
    const std::size_t dim = 1 + rng() % 20;
    const std::size_t k = (trial % 10 == 0) ? rows + 5 : rng() % 50;  // sometimes k > rows
    const std::size_t block = 1 + rng() % 700;
    ItemMatrix m = QuantisedMatrix(rows, dim, rng);
    std::vector<float> q = QuantisedQuery(dim, rng);

    // Exclusions split between a bitmap (shorter than the matrix on some trials) and a sorted
    // list with duplicates and out-of-range entries.
    std::vector<bool> excluded(rows, false);
    std::vector<uint64_t> bitmap((rows / 64) + (trial % 3 == 0 ? 0 : 1), 0);
    std::vector<uint32_t> sorted;
    for (std::size_t r = 0; r < rows; ++r) {
      const auto draw = rng() % 10;
      if (draw == 0 && r / 64 < bitmap.size()) {
        bitmap[r / 64] |= uint64_t{1} << (r % 64);
        excluded[r] = true;
      } else if (draw == 1) {
        sorted.push_back(static_cast<uint32_t>(r));
        if (rng() % 4 == 0) sorted.push_back(static_cast<uint32_t>(r));
        excluded[r] = true;
      }
    }
    sorted.push_back(static_cast<uint32_t>(rows + 3));
    Exclusions ex{bitmap, sorted};

    std::vector<float> scratch(block);
    TopKSelector sel(k);
    ScanOutcome outcome;
    ASSERT_TRUE(top_k_by_dot(m.view(), q, ex, scratch, &sel, &outcome).ok());
    EXPECT_FALSE(outcome.stopped_early);
    EXPECT_EQ(outcome.rows_scanned, rows);
    auto got = sel.SortedResult();
    const auto expect = BruteForce(m, q, excluded, k);
    ASSERT_EQ(std::vector<ScoredIndex>(got.begin(), got.end()), expect)
        << "trial " << trial << " rows=" << rows << " dim=" << dim << " k=" << k
        << " block=" << block;
  }
}

TEST(TopKByDotTest, StopsEarlyBetweenBlocksWhenAsked) {
  std::mt19937_64 rng(5);
  const std::size_t rows = 10000, dim = 8, block = 1024;
  ItemMatrix m = QuantisedMatrix(rows, dim, rng);
  std::vector<float> q = QuantisedQuery(dim, rng);
  std::vector<float> scratch(block);
  TopKSelector sel(10);
  ScanOutcome outcome;
  int calls = 0;
  auto stop_after_three_blocks = [&] { return ++calls >= 3; };
  ASSERT_TRUE(
      top_k_by_dot(m.view(), q, Exclusions{}, scratch, &sel, &outcome, stop_after_three_blocks)
          .ok());
  // The check runs before blocks 2, 3, ...: the third check (before block 4) stops the scan.
  EXPECT_TRUE(outcome.stopped_early);
  EXPECT_EQ(calls, 3);
  EXPECT_EQ(outcome.rows_scanned, 3 * block);
  // The result is exactly the top-10 of the scanned prefix.
  std::vector<bool> excluded(rows, false);
  for (std::size_t r = 3 * block; r < rows; ++r) excluded[r] = true;
  auto got = sel.SortedResult();
  EXPECT_EQ(std::vector<ScoredIndex>(got.begin(), got.end()), BruteForce(m, q, excluded, 10));

  // An already-expired deadline still yields the first block.
  sel.Reset(10);
  auto always = [] { return true; };
  ASSERT_TRUE(top_k_by_dot(m.view(), q, Exclusions{}, scratch, &sel, &outcome, always).ok());
  EXPECT_TRUE(outcome.stopped_early);
  EXPECT_EQ(outcome.rows_scanned, block);

  // A scan that fits in one block never asks.
  ItemMatrix small = QuantisedMatrix(100, dim, rng);
  calls = 0;
  sel.Reset(10);
  ASSERT_TRUE(
      top_k_by_dot(small.view(), q, Exclusions{}, scratch, &sel, &outcome, stop_after_three_blocks)
          .ok());
  EXPECT_EQ(calls, 0);
  EXPECT_FALSE(outcome.stopped_early);
}

TEST(TopKByDotTest, RejectsBadArgumentsAndLeavesSelectorAlone) {
  ItemMatrix m(10, 4);
  std::vector<float> q(3), scratch(16);
  TopKSelector sel(2);
  sel.Push(99, 1.0f);
  ScanOutcome outcome;
  EXPECT_EQ(top_k_by_dot(m.view(), q, {}, scratch, &sel, &outcome).code(),
            Status::Code::kInvalidArgument);
  q.resize(4);
  EXPECT_EQ(top_k_by_dot(m.view(), q, {}, {}, &sel, &outcome).code(),
            Status::Code::kInvalidArgument);
  EXPECT_EQ(top_k_by_dot(m.view(), q, {}, scratch, nullptr, &outcome).code(),
            Status::Code::kInvalidArgument);
  ASSERT_EQ(sel.size(), 1u);
  EXPECT_EQ(sel.SortedResult()[0].index, 99u);
}

// The pruned scan must leave the selector exactly as the full scan does (same rows, same
// float scores bit for bit): it only skips rows whose rigorous upper bound is below the
// current K-th best. Exercised on Gaussian rows, rows of wildly different norms, quantised
// rows full of exact ties, zero rows, k above the row count, exclusions, odd dimensions.
TEST(TopKByDotPrunedTest, SelectorEqualsTheFullScanBitForBit) {
  std::mt19937_64 rng(99);
  std::normal_distribution<float> normal(0.0f, 1.0f);
  for (int trial = 0; trial < 150; ++trial) {
    const std::size_t rows = rng() % 4000;
    const std::size_t dim = 1 + rng() % 100;
    const std::size_t k = (trial % 15 == 0) ? rows + 3 : rng() % 60;
    const std::size_t block = 1 + rng() % 900;
    ItemMatrix m(rows, dim);
    const int kind = trial % 3;
    if (kind == 0) {
      m = QuantisedMatrix(rows, dim, rng);  // ties everywhere
    } else {
      for (std::size_t r = 0; r < rows; ++r) {
        // kind 2: norms spread over six orders of magnitude, and some all-zero rows
        const float scale = kind == 1 ? 1.0f : std::pow(10.0f, static_cast<float>(rng() % 7) - 3);
        const bool zero = kind == 2 && rng() % 20 == 0;
        for (auto& v : m.mutable_row(r)) v = zero ? 0.0f : scale * normal(rng);
      }
    }
    std::vector<float> q(dim);
    for (auto& v : q)
      v = kind == 0 ? static_cast<float>(static_cast<int>(rng() % 3) - 1) : normal(rng);
    std::vector<uint32_t> excluded;
    for (std::size_t r = 0; r < rows; ++r)
      if (rng() % 9 == 0) excluded.push_back(static_cast<uint32_t>(r));
    QuantizedItems codes;
    ASSERT_TRUE(QuantizedItems::Build(m.view(), &codes).ok());
    std::vector<float> scratch(block);
    TopKSelector full(k), pruned(k);
    ScanOutcome full_out, pruned_out;
    ASSERT_TRUE(
        top_k_by_dot(m.view(), q, Exclusions{{}, excluded}, scratch, &full, &full_out).ok());
    ASSERT_TRUE(top_k_by_dot_pruned(m.view(), codes, q, Exclusions{{}, excluded}, scratch, &pruned,
                                    &pruned_out)
                    .ok());
    ASSERT_EQ(Sorted(pruned), Sorted(full))
        << "trial " << trial << " rows=" << rows << " dim=" << dim << " k=" << k;
    EXPECT_EQ(pruned_out.rows_scanned, rows);
    EXPECT_FALSE(pruned_out.stopped_early);
    EXPECT_EQ(full_out.rows_scored_exactly, rows);
    EXPECT_LE(pruned_out.rows_scored_exactly, rows - excluded.size());
    EXPECT_GE(pruned_out.rows_scored_exactly, std::min(k, rows - excluded.size()));
  }
}

// The pruning must actually prune on ordinary data, or the int8 pass is pure overhead. On
// 100,000 Gaussian rows of dim 64 and a top-20, the bound (~0.2 % of |x||u|) is far narrower
// than the gap between the 20th best score (~4 standard deviations) and the bulk, so only a
// few hundred rows should need their exact score; 2 % is a loose ceiling.
TEST(TopKByDotPrunedTest, ScoresFewRowsExactlyOnGaussianData) {
  std::mt19937_64 rng(3);
  std::normal_distribution<float> normal(0.0f, 1.0f);
  const std::size_t rows = 100000, dim = 64;
  ItemMatrix m(rows, dim);
  for (std::size_t r = 0; r < rows; ++r)
    for (auto& v : m.mutable_row(r)) v = normal(rng);
  QuantizedItems codes;
  ASSERT_TRUE(QuantizedItems::Build(m.view(), &codes).ok());
  std::vector<float> scratch(kDefaultScanBlockRows);
  for (int query = 0; query < 5; ++query) {
    std::vector<float> q(dim);
    for (auto& v : q) v = normal(rng);
    TopKSelector sel(20);
    ScanOutcome outcome;
    ASSERT_TRUE(top_k_by_dot_pruned(m.view(), codes, q, {}, scratch, &sel, &outcome).ok());
    EXPECT_GE(outcome.rows_scored_exactly, 20u);
    EXPECT_LT(outcome.rows_scored_exactly, rows / 50) << "query " << query;
  }
}

// The cosine variant against top_k_by_cosine, bit for bit, on rows with norms spread over six
// orders of magnitude (cosine ignores them; the pruning bound must not), zero rows, ties and
// exclusions.
TEST(TopKByCosinePrunedTest, SelectorEqualsTheFullCosineScanBitForBit) {
  std::mt19937_64 rng(123);
  std::normal_distribution<float> normal(0.0f, 1.0f);
  for (int trial = 0; trial < 100; ++trial) {
    const std::size_t rows = 1 + rng() % 3000;
    const std::size_t dim = 1 + rng() % 80;
    const std::size_t k = (trial % 10 == 0) ? rows + 2 : 1 + rng() % 40;
    ItemMatrix m(rows, dim);
    if (trial % 4 == 0) {
      m = QuantisedMatrix(rows, dim, rng);
    } else {
      for (std::size_t r = 0; r < rows; ++r) {
        const float scale = std::pow(10.0f, static_cast<float>(rng() % 7) - 3);
        const bool zero = rng() % 25 == 0;
        for (auto& v : m.mutable_row(r)) v = zero ? 0.0f : scale * normal(rng);
      }
    }
    std::vector<float> norms(rows);
    ASSERT_TRUE(row_norms(m.view(), norms).ok());
    std::vector<float> q(dim);
    for (auto& v : q) v = normal(rng);
    std::vector<uint32_t> excluded;
    for (std::size_t r = 0; r < rows; ++r)
      if (rng() % 11 == 0) excluded.push_back(static_cast<uint32_t>(r));
    QuantizedItems codes;
    ASSERT_TRUE(QuantizedItems::Build(m.view(), &codes).ok());
    std::vector<float> scratch(1 + rng() % 700);
    TopKSelector full(k), pruned(k);
    ScanOutcome full_out, pruned_out;
    ASSERT_TRUE(
        top_k_by_cosine(m.view(), norms, q, Exclusions{{}, excluded}, scratch, &full, &full_out)
            .ok());
    ASSERT_TRUE(top_k_by_cosine_pruned(m.view(), codes, norms, q, Exclusions{{}, excluded}, scratch,
                                       &pruned, &pruned_out)
                    .ok());
    ASSERT_EQ(Sorted(pruned), Sorted(full))
        << "trial " << trial << " rows=" << rows << " dim=" << dim << " k=" << k;
  }
  // A zero query has no cosine: refused like the full scan does.
  ItemMatrix m(4, 3);
  std::vector<float> norms(4), zero(3, 0.0f), scratch(8);
  QuantizedItems codes;
  ASSERT_TRUE(QuantizedItems::Build(m.view(), &codes).ok());
  TopKSelector sel(2);
  ScanOutcome outcome;
  EXPECT_EQ(
      top_k_by_cosine_pruned(m.view(), codes, norms, zero, {}, scratch, &sel, &outcome).code(),
      Status::Code::kInvalidArgument);
}

// Where the bound matters most: rows whose int8 estimates are indistinguishable. A bound
// that were too tight (e.g. the rounding residuals left out) would let an earlier near-tie
// hide the true best row; the hand-built answer is row 1234 with score exactly 1.
TEST(TopKByDotPrunedTest, KnownBestRowAmongNearTies) {
  // 3000 rows that all score 1.0 - tiny amounts, one that scores 1.0 exactly: the int8
  // estimates cannot tell them apart, the bound must keep all of them in play.
  const std::size_t rows = 3000, dim = 64;
  ItemMatrix m(rows, dim);
  std::mt19937_64 rng(5);
  for (std::size_t r = 0; r < rows; ++r) {
    auto row = m.mutable_row(r);
    row[0] = 1.0f - static_cast<float>(1 + rng() % 1000) * 1e-6f;
    for (std::size_t j = 1; j < dim; ++j) row[j] = static_cast<float>(rng() % 100) * 1e-3f;
  }
  m.mutable_row(1234)[0] = 1.0f;
  std::vector<float> q(dim, 0.0f);
  q[0] = 1.0f;
  QuantizedItems codes;
  ASSERT_TRUE(QuantizedItems::Build(m.view(), &codes).ok());
  std::vector<float> scratch(256);
  TopKSelector sel(1);
  ScanOutcome outcome;
  ASSERT_TRUE(top_k_by_dot_pruned(m.view(), codes, q, {}, scratch, &sel, &outcome).ok());
  ASSERT_EQ(sel.size(), 1u);
  EXPECT_EQ(sel.SortedResult()[0].index, 1234u);
  EXPECT_EQ(sel.SortedResult()[0].score, 1.0f);
}

TEST(TopKByDotPrunedTest, RejectsMismatchesAndNonFiniteValues) {
  ItemMatrix m(10, 4), other(11, 4);
  QuantizedItems codes;
  ASSERT_TRUE(QuantizedItems::Build(m.view(), &codes).ok());
  EXPECT_EQ(codes.rows(), 10u);
  EXPECT_EQ(codes.dim(), 4u);
  std::vector<float> q(4, 1.0f), scratch(16);
  TopKSelector sel(2);
  ScanOutcome outcome;
  EXPECT_EQ(top_k_by_dot_pruned(other.view(), codes, q, {}, scratch, &sel, &outcome).code(),
            Status::Code::kInvalidArgument);
  q[2] = std::numeric_limits<float>::infinity();
  EXPECT_EQ(top_k_by_dot_pruned(m.view(), codes, q, {}, scratch, &sel, &outcome).code(),
            Status::Code::kInvalidArgument);
  m.mutable_row(3)[1] = std::numeric_limits<float>::quiet_NaN();
  QuantizedItems bad;
  const Status s = QuantizedItems::Build(m.view(), &bad);
  EXPECT_EQ(s.code(), Status::Code::kInvalidArgument);
  EXPECT_NE(s.message().find("row 3"), std::string::npos) << s.message();
  EXPECT_EQ(bad.rows(), 0u);  // unchanged on error
}

TEST(TopKByCosineTest, MatchesBruteForceCosine) {
  std::mt19937_64 rng(99);
  std::normal_distribution<float> normal(0.0f, 1.0f);
  const std::size_t rows = 2500, dim = 24;
  ItemMatrix m(rows, dim);
  for (std::size_t r = 0; r < rows; ++r) {
    // Widely varying norms, so that cosine and dot rankings differ; one all-zero row.
    const float scale = r == 17 ? 0.0f : std::exp(normal(rng));
    for (auto& v : m.mutable_row(r)) v = scale * normal(rng);
  }
  std::vector<float> q(dim);
  for (auto& v : q) v = normal(rng);
  std::vector<float> norms(rows);
  ASSERT_TRUE(row_norms(m.view(), norms).ok());
  EXPECT_EQ(norms[17], 0.0f);

  std::vector<uint32_t> excluded_rows = {3, 500, 501, 2499};
  std::vector<float> scratch(kDefaultScanBlockRows);
  TopKSelector sel(30);
  ScanOutcome outcome;
  ASSERT_TRUE(
      top_k_by_cosine(m.view(), norms, q, Exclusions{{}, excluded_rows}, scratch, &sel, &outcome)
          .ok());
  auto got = sel.SortedResult();

  // Reference in double precision.
  const double qn = std::sqrt(NaiveDot(q, q));
  std::vector<std::pair<double, uint32_t>> ref;
  for (std::size_t r = 0; r < rows; ++r) {
    if (std::find(excluded_rows.begin(), excluded_rows.end(), r) != excluded_rows.end()) continue;
    const double rn = std::sqrt(NaiveDot(m.row(r), m.row(r)));
    ref.push_back({rn > 0 ? NaiveDot(m.row(r), q) / (rn * qn) : 0.0, static_cast<uint32_t>(r)});
  }
  std::sort(ref.begin(), ref.end(), [](auto a, auto b) { return a.first > b.first; });
  ASSERT_EQ(got.size(), 30u);
  for (std::size_t j = 0; j < got.size(); ++j) {
    // Continuous random data: no near-ties among the top 30 at this tolerance.
    EXPECT_EQ(got[j].index, ref[j].second) << j;
    EXPECT_NEAR(got[j].score, ref[j].first, 1e-5) << j;
  }
  // Cosine of a row with itself as the query is 1 and ranks it first.
  sel.Reset(1);
  std::vector<float> self(m.row(42).begin(), m.row(42).end());
  ASSERT_TRUE(top_k_by_cosine(m.view(), norms, self, {}, scratch, &sel, &outcome).ok());
  EXPECT_EQ(sel.SortedResult()[0].index, 42u);
  EXPECT_NEAR(sel.SortedResult()[0].score, 1.0f, 1e-5f);

  std::vector<float> zero(dim, 0.0f);
  EXPECT_EQ(top_k_by_cosine(m.view(), norms, zero, {}, scratch, &sel, &outcome).code(),
            Status::Code::kInvalidArgument);
}

}  // namespace
}  // namespace plumb
