#include "core/scan.h"

#include <gtest/gtest.h>

#include <algorithm>
#include <cmath>
#include <random>
#include <vector>

namespace plumb {
namespace {

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

// A batched scan must leave every task exactly as its own top_k_by_dot would: the same
// kernel over the same rows in the same order, so the comparison is bit for bit (an exact
// algebraic property of the design, not a tolerance), and exact against brute force too.
TEST(TopKByDotBatchTest, EachTaskEqualsItsOwnScanAndBruteForce) {
  std::mt19937_64 rng(77);
  std::normal_distribution<float> normal(0.0f, 1.0f);
  for (int trial = 0; trial < 60; ++trial) {
    const std::size_t rows = rng() % 2500;
    const std::size_t dim = 1 + rng() % 70;
    const std::size_t tasks = 1 + rng() % kMaxScanBatch;
    const std::size_t block = 1 + rng() % 400;
    // Half the trials quantised (ties everywhere), half Gaussian (rounding-sensitive).
    ItemMatrix m(rows, dim);
    if (trial % 2 == 0) {
      m = QuantisedMatrix(rows, dim, rng);
    } else {
      for (std::size_t r = 0; r < rows; ++r)
        for (auto& v : m.mutable_row(r)) v = normal(rng);
    }
    std::vector<std::vector<float>> queries(tasks);
    std::vector<std::vector<uint32_t>> excluded(tasks);
    std::vector<std::size_t> ks(tasks);
    for (std::size_t t = 0; t < tasks; ++t) {
      queries[t] = QuantisedQuery(dim, rng);
      if (trial % 2 == 1)
        for (auto& v : queries[t]) v = normal(rng);
      for (std::size_t r = 0; r < rows; ++r)
        if (rng() % 7 == 0) excluded[t].push_back(static_cast<uint32_t>(r));
      ks[t] = rng() % 40;
    }
    std::vector<TopKSelector> batch_sel(tasks);
    std::vector<ScanOutcome> batch_out(tasks);
    std::vector<ScanTask> batch(tasks);
    for (std::size_t t = 0; t < tasks; ++t) {
      batch_sel[t].Reset(ks[t]);
      batch[t] =
          ScanTask{queries[t], Exclusions{{}, excluded[t]}, &batch_sel[t], &batch_out[t], {}};
    }
    std::vector<float> scratch(block), batch_scratch(2 * block);  // two buffers of `block` rows
    ASSERT_TRUE(top_k_by_dot_batch(m.view(), batch, batch_scratch).ok());
    for (std::size_t t = 0; t < tasks; ++t) {
      TopKSelector alone(ks[t]);
      ScanOutcome alone_out;
      ASSERT_TRUE(top_k_by_dot(m.view(), queries[t], Exclusions{{}, excluded[t]}, scratch, &alone,
                               &alone_out)
                      .ok());
      auto a = alone.SortedResult();
      auto b = batch_sel[t].SortedResult();
      ASSERT_EQ(std::vector<ScoredIndex>(b.begin(), b.end()),
                std::vector<ScoredIndex>(a.begin(), a.end()))
          << "trial " << trial << " task " << t << " of " << tasks;
      EXPECT_EQ(batch_out[t].rows_scanned, rows);
      EXPECT_FALSE(batch_out[t].stopped_early);
      if (trial % 2 == 0) {
        std::vector<bool> ex(rows, false);
        for (uint32_t r : excluded[t]) ex[r] = true;
        EXPECT_EQ(std::vector<ScoredIndex>(b.begin(), b.end()),
                  BruteForce(m, queries[t], ex, ks[t]))
            << "trial " << trial << " task " << t;
      }
    }
  }
}

TEST(TopKByDotBatchTest, AStoppedTaskLeavesTheBatchAndTheOthersFinish) {
  std::mt19937_64 rng(8);
  const std::size_t rows = 5000, dim = 16, block = 256;
  ItemMatrix m = QuantisedMatrix(rows, dim, rng);
  std::vector<float> q1 = QuantisedQuery(dim, rng), q2 = QuantisedQuery(dim, rng);
  TopKSelector s1(5), s2(5);
  ScanOutcome o1, o2;
  int calls = 0;
  auto stop_at_third_check = [&] { return ++calls >= 3; };
  std::vector<ScanTask> tasks = {ScanTask{q1, {}, &s1, &o1, stop_at_third_check},
                                 ScanTask{q2, {}, &s2, &o2, {}}};
  std::vector<float> scratch(2 * block);
  ASSERT_TRUE(top_k_by_dot_batch(m.view(), tasks, scratch).ok());
  EXPECT_TRUE(o1.stopped_early);
  EXPECT_EQ(o1.rows_scanned, 3 * block);
  EXPECT_FALSE(o2.stopped_early);
  EXPECT_EQ(o2.rows_scanned, rows);
  std::vector<bool> prefix(rows, false);
  for (std::size_t r = 3 * block; r < rows; ++r) prefix[r] = true;
  auto got1 = s1.SortedResult();
  EXPECT_EQ(std::vector<ScoredIndex>(got1.begin(), got1.end()), BruteForce(m, q1, prefix, 5));
  auto got2 = s2.SortedResult();
  EXPECT_EQ(std::vector<ScoredIndex>(got2.begin(), got2.end()),
            BruteForce(m, q2, std::vector<bool>(rows, false), 5));
}

TEST(TopKByDotBatchTest, RejectsBadTasksWithoutTouchingAnySelector) {
  ItemMatrix m(10, 4);
  std::vector<float> good(4), bad(3), scratch(16);
  TopKSelector s1(2), s2(2);
  s1.Push(7, 1.0f);
  s2.Push(8, 1.0f);
  ScanOutcome o1, o2;
  std::vector<ScanTask> tasks = {ScanTask{good, {}, &s1, &o1, {}}, ScanTask{bad, {}, &s2, &o2, {}}};
  EXPECT_EQ(top_k_by_dot_batch(m.view(), tasks, scratch).code(), Status::Code::kInvalidArgument);
  EXPECT_EQ(s1.SortedResult()[0].index, 7u);
  EXPECT_EQ(s2.SortedResult()[0].index, 8u);
  std::vector<ScanTask> too_many(kMaxScanBatch + 1, ScanTask{good, {}, &s1, &o1, {}});
  EXPECT_EQ(top_k_by_dot_batch(m.view(), too_many, scratch).code(), Status::Code::kInvalidArgument);
  EXPECT_EQ(top_k_by_dot_batch(m.view(), {}, scratch).code(), Status::Code::kOk);
  std::vector<float> one(1);
  EXPECT_EQ(top_k_by_dot_batch(m.view(), tasks, one).code(), Status::Code::kInvalidArgument);
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
