#include "trainer/sampler.h"

#include <gtest/gtest.h>

#include <algorithm>
#include <chrono>
#include <set>
#include <vector>

#include "tests/trainer/test_models.h"
#include "trainer/dynamic_sampler.h"
#include "trainer/objective.h"

namespace plumb::trainer {
namespace {

using testing::RandomData;
using testing::RandomModel;

std::set<std::pair<uint32_t, uint32_t>> AsSet(const Interactions& d) {
  std::set<std::pair<uint32_t, uint32_t>> s;
  for (const Pair& p : d.pairs()) s.insert({p.user, p.item});
  return s;
}

// The CPR constraints of DESIGN.md section 2, checked independently of the sampler's code.
void ExpectValidCpr(const std::set<std::pair<uint32_t, uint32_t>>& observed, const Sample& s) {
  ASSERT_GE(s.k, 2);
  std::set<uint32_t> users, items;
  for (uint32_t t = 0; t < s.k; ++t) {
    EXPECT_TRUE(observed.count({s.users[t], s.items[t]})) << "pair " << t << " not observed";
    users.insert(s.users[t]);
    items.insert(s.items[t]);
    EXPECT_FALSE(observed.count({s.users[t], s.items[(t + 1) % s.k]}))
        << "cross pair " << t << " observed";
  }
  EXPECT_EQ(users.size(), s.k) << "users not distinct";
  EXPECT_EQ(items.size(), s.k) << "items not distinct";
}

TEST(CprSampler, EverySampleSatisfiesTheConstraints) {
  // Density 0.15 makes invalid draws common, so rejection is exercised.
  const Interactions data = RandomData(60, 50, 0.15, 4);
  const auto observed = AsSet(data);
  for (uint32_t k : {2u, 3u, 5u}) {
    CprSamplerOptions o;
    o.k = k;
    std::unique_ptr<CprSampler> sampler;
    ASSERT_TRUE(CprSampler::Create(&data, o, &sampler).ok());
    Rng rng(k);
    Sample s;
    for (int n = 0; n < 5000; ++n) {
      ASSERT_TRUE(sampler->Draw(&rng, &s).ok());
      ASSERT_EQ(s.k, k);
      ExpectValidCpr(observed, s);
      ASSERT_TRUE(CprSampler::IsValid(data, s));
    }
  }
}

TEST(CprSampler, MixesSampleSizesInTheRequestedShare) {
  const Interactions data = RandomData(100, 80, 0.05, 5);
  const auto observed = AsSet(data);
  CprSamplerOptions o;
  o.k = 2;
  o.mix_k = 3;
  o.mix_share = 0.3;
  std::unique_ptr<CprSampler> sampler;
  ASSERT_TRUE(CprSampler::Create(&data, o, &sampler).ok());
  Rng rng(9);
  Sample s;
  int threes = 0;
  const int n = 20000;
  for (int i = 0; i < n; ++i) {
    ASSERT_TRUE(sampler->Draw(&rng, &s).ok());
    ExpectValidCpr(observed, s);
    threes += s.k == 3;
  }
  // Binomial(20000, 0.3): standard deviation 65; allow 5 of them.
  EXPECT_NEAR(threes, 0.3 * n, 330);
}

TEST(CprSampler, AnchoredSamplesStartWithTheAnchor) {
  const Interactions data = RandomData(50, 40, 0.08, 6);
  const auto observed = AsSet(data);
  std::unique_ptr<CprSampler> sampler;
  ASSERT_TRUE(CprSampler::Create(&data, CprSamplerOptions{}, &sampler).ok());
  Rng rng(1);
  Sample s;
  for (uint64_t a = 0; a < data.size(); a += 7) {
    ASSERT_TRUE(sampler->DrawAnchored(a, &rng, &s).ok());
    EXPECT_EQ(s.users[0], data.pair(a).user);
    EXPECT_EQ(s.items[0], data.pair(a).item);
    ExpectValidCpr(observed, s);
  }
  EXPECT_EQ(sampler->DrawAnchored(data.size(), &rng, &s).code(), Status::Code::kInvalidArgument);
}

TEST(CprSampler, TooFewUsersOrItemsIsAClearError) {
  Interactions data;
  std::unique_ptr<CprSampler> sampler;
  CprSamplerOptions o;
  o.k = 3;
  ASSERT_TRUE(CprSampler::Create(&data, o, &sampler).ok());
  Rng rng(1);
  Sample s;
  Status st = sampler->Draw(&rng, &s);  // empty
  EXPECT_EQ(st.code(), Status::Code::kFailedPrecondition);
  ASSERT_TRUE(data.AddAll(std::vector<Pair>{{0, 0}, {0, 1}, {1, 2}, {1, 3}, {0, 4}}).ok());
  st = sampler->Draw(&rng, &s);  // 2 users < k = 3
  EXPECT_EQ(st.code(), Status::Code::kFailedPrecondition);
  EXPECT_NE(st.message().find("3 distinct users"), std::string::npos) << st.ToString();
  EXPECT_EQ(sampler->CheckData().code(), Status::Code::kFailedPrecondition);
  // One more user makes k = 3 possible.
  ASSERT_TRUE(data.Add(2, 5).ok());
  EXPECT_TRUE(sampler->CheckData().ok());
  EXPECT_TRUE(sampler->Draw(&rng, &s).ok());
}

TEST(CprSampler, DenseDataGivesUpWithAnErrorInsteadOfLooping) {
  // Every user has every item: every cross pair is observed, no valid sample exists.
  std::vector<Pair> all;
  for (uint32_t u = 0; u < 30; ++u) {
    for (uint32_t i = 0; i < 30; ++i) all.push_back(Pair{u, i});
  }
  Interactions data;
  ASSERT_TRUE(Interactions::Build(all, 30, 30, &data).ok());
  std::unique_ptr<CprSampler> sampler;
  ASSERT_TRUE(CprSampler::Create(&data, CprSamplerOptions{}, &sampler).ok());
  Rng rng(1);
  Sample s;
  const auto start = std::chrono::steady_clock::now();
  const Status st = sampler->Draw(&rng, &s);
  EXPECT_EQ(st.code(), Status::Code::kResourceExhausted);
  EXPECT_NE(st.message().find("too dense"), std::string::npos) << st.ToString();
  // Bounded work: 2000 attempts of a few lookups each (generous wall-clock bound).
  EXPECT_LT(std::chrono::steady_clock::now() - start, std::chrono::seconds(5));
}

TEST(CprSampler, RejectsBadOptions) {
  Interactions data;
  std::unique_ptr<CprSampler> s;
  CprSamplerOptions o;
  o.k = 1;
  EXPECT_EQ(CprSampler::Create(&data, o, &s).code(), Status::Code::kInvalidArgument);
  o.k = kMaxSampleSlots + 1;
  EXPECT_EQ(CprSampler::Create(&data, o, &s).code(), Status::Code::kInvalidArgument);
  o.k = 2;
  o.mix_share = 1.5;
  EXPECT_EQ(CprSampler::Create(&data, o, &s).code(), Status::Code::kInvalidArgument);
}

TEST(NegativeSampler, NegativesAreUnobservedAndUniform) {
  // User 0 has every even item of 100; the 50 odd ones are its candidates.
  Interactions data;
  ASSERT_TRUE(data.EnsureShape(2, 100).ok());  // item 99 exists though nobody borrowed it
  for (uint32_t i = 0; i < 100; i += 2) ASSERT_TRUE(data.Add(0, i).ok());
  ASSERT_TRUE(data.Add(1, 1).ok());
  NegativeSamplerOptions o;
  o.num_negatives = 4;
  std::unique_ptr<NegativeSampler> sampler;
  ASSERT_TRUE(NegativeSampler::Create(&data, o, &sampler).ok());
  Rng rng(2);
  std::vector<int> counts(100, 0);
  const int draws = 50000;
  for (int n = 0; n < draws; ++n) {
    uint32_t j;
    ASSERT_TRUE(sampler->DrawNegative(0, &rng, &j).ok());
    ASSERT_LT(j, 100u);
    ASSERT_FALSE(data.Contains(0, j));
    ++counts[j];
  }
  // Pearson chi-square against uniform over the 50 odd items; 49 degrees of freedom, the
  // 0.999 quantile is about 85.4 (chi-square tables).
  double chi2 = 0.0;
  const double expect = draws / 50.0;
  for (uint32_t i = 1; i < 100; i += 2)
    chi2 += (counts[i] - expect) * (counts[i] - expect) / expect;
  EXPECT_LT(chi2, 85.4);
  Sample s;
  for (int n = 0; n < 1000; ++n) {
    ASSERT_TRUE(sampler->Draw(&rng, &s).ok());
    ASSERT_EQ(s.num_negatives, 4);
    ASSERT_TRUE(data.Contains(s.users[0], s.items[0]));
    for (int m = 0; m < 4; ++m) ASSERT_FALSE(data.Contains(s.users[0], s.negatives[m]));
  }
}

TEST(NegativeSampler, DenseUserUsesExactFallbackAndFullUserIsAnError) {
  Interactions data;
  for (uint32_t i = 0; i < 1000; ++i) {
    if (i != 617) {
      ASSERT_TRUE(data.Add(0, i).ok());
    }
  }
  std::unique_ptr<NegativeSampler> sampler;
  ASSERT_TRUE(NegativeSampler::Create(&data, NegativeSamplerOptions{}, &sampler).ok());
  Rng rng(3);
  for (int n = 0; n < 100; ++n) {
    uint32_t j = 0;
    ASSERT_TRUE(sampler->DrawNegative(0, &rng, &j).ok());
    EXPECT_EQ(j, 617u);  // the only unobserved item
  }
  ASSERT_TRUE(data.Add(0, 617).ok());
  uint32_t j;
  const Status st = sampler->DrawNegative(0, &rng, &j);
  EXPECT_EQ(st.code(), Status::Code::kFailedPrecondition);
  EXPECT_NE(st.message().find("every item"), std::string::npos);
  Sample s;
  EXPECT_EQ(sampler->Draw(&rng, &s).code(), Status::Code::kFailedPrecondition);
}

TEST(DynamicSampler, KeepsExactlyTheSmallestMargins) {
  const Interactions data = RandomData(80, 60, 0.06, 8);
  const Embeddings model = RandomModel(16, 80, 60, 3);
  std::unique_ptr<CprSampler> sampler;
  ASSERT_TRUE(CprSampler::Create(&data, CprSamplerOptions{}, &sampler).ok());
  CprObjective cpr;
  for (double beta : {1.5, 3.0, 7.0}) {
    DynamicSampler dyn(sampler.get(), &cpr, beta);
    Rng rng(4);
    std::vector<Sample> batch;
    const uint32_t B = 100;
    ASSERT_TRUE(dyn.DrawBatch(model, B, &rng, &batch).ok());
    ASSERT_EQ(batch.size(), B);
    const size_t n = static_cast<size_t>(std::ceil(beta * B));
    ASSERT_EQ(dyn.candidates().size(), n);
    // Recompute every candidate's margin; the kept ones must be the B smallest.
    std::vector<float> all;
    for (const Sample& c : dyn.candidates()) all.push_back(cpr.Margin(model, c));
    std::vector<float> kept;
    for (const Sample& s : batch) kept.push_back(cpr.Margin(model, s));
    std::sort(all.begin(), all.end());
    std::sort(kept.begin(), kept.end());
    EXPECT_EQ(kept, std::vector<float>(all.begin(), all.begin() + B)) << "beta " << beta;
    EXPECT_LT(kept.back(), all.back());  // something was actually rejected
  }
}

TEST(DynamicSampler, BetaOneIsPlainRandomSampling) {
  const Interactions data = RandomData(40, 30, 0.1, 2);
  const Embeddings model = RandomModel(8, 40, 30, 1);
  std::unique_ptr<CprSampler> sampler;
  ASSERT_TRUE(CprSampler::Create(&data, CprSamplerOptions{}, &sampler).ok());
  CprObjective cpr;
  DynamicSampler dyn(sampler.get(), &cpr, 1.0);
  Rng a(6), b(6);
  std::vector<Sample> batch;
  ASSERT_TRUE(dyn.DrawBatch(model, 50, &a, &batch).ok());
  ASSERT_EQ(batch.size(), 50u);
  for (const Sample& s : batch) {
    Sample plain;
    ASSERT_TRUE(sampler->Draw(&b, &plain).ok());
    EXPECT_EQ(s.users, plain.users);
    EXPECT_EQ(s.items, plain.items);
  }
}

TEST(DynamicSampler, AnchoredBatchKeepsHardestPerAnchor) {
  const Interactions data = RandomData(60, 50, 0.06, 12);
  const Embeddings model = RandomModel(8, 60, 50, 2);
  std::unique_ptr<CprSampler> sampler;
  ASSERT_TRUE(CprSampler::Create(&data, CprSamplerOptions{}, &sampler).ok());
  CprObjective cpr;
  DynamicSampler hard(sampler.get(), &cpr, 4.0), plain(sampler.get(), &cpr, 1.0);
  std::vector<uint64_t> anchors;
  for (uint64_t a = 0; a < 100; ++a) anchors.push_back(a);
  Rng r1(1), r2(1);
  std::vector<Sample> hb, pb;
  ASSERT_TRUE(hard.DrawAnchoredBatch(model, anchors, &r1, &hb).ok());
  ASSERT_TRUE(plain.DrawAnchoredBatch(model, anchors, &r2, &pb).ok());
  ASSERT_EQ(hb.size(), anchors.size());
  double hard_sum = 0, plain_sum = 0;
  for (size_t n = 0; n < anchors.size(); ++n) {
    EXPECT_EQ(hb[n].users[0], data.pair(anchors[n]).user);
    EXPECT_EQ(hb[n].items[0], data.pair(anchors[n]).item);
    hard_sum += cpr.Margin(model, hb[n]);
    plain_sum += cpr.Margin(model, pb[n]);
  }
  // The min of 4 draws is below a single draw on average.
  EXPECT_LT(hard_sum, plain_sum);
}

}  // namespace
}  // namespace plumb::trainer
