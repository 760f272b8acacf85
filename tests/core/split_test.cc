#include "core/split.h"

#include <gtest/gtest.h>

#include <algorithm>
#include <cmath>
#include <set>
#include <vector>

namespace plumb {
namespace {

// Held-out data: n_per_item interactions for every item, users numbered in input order.
std::vector<Interaction> PerItemInteractions(std::size_t n_items, std::size_t n_per_item) {
  std::vector<Interaction> v;
  v.reserve(n_items * n_per_item);
  for (std::size_t j = 0; j < n_per_item; ++j)
    for (std::size_t i = 0; i < n_items; ++i)
      v.push_back({static_cast<uint32_t>(v.size()), static_cast<uint32_t>(i)});
  return v;
}

TEST(KeepProbabilityTest, InversePopularityNormalisedToLeastPopular) {
  // p = (min_pop / pop)^gamma; pop 0 counts as 1.
  EXPECT_DOUBLE_EQ(keep_probability(5, 5, 1.0), 1.0);
  EXPECT_DOUBLE_EQ(keep_probability(20, 5, 1.0), 0.25);
  EXPECT_DOUBLE_EQ(keep_probability(20, 5, 0.5), 0.5);
  EXPECT_DOUBLE_EQ(keep_probability(20, 5, 0.0), 1.0);
  EXPECT_DOUBLE_EQ(keep_probability(0, 1, 1.0), 1.0);
  EXPECT_DOUBLE_EQ(keep_probability(0, 0, 2.0), 1.0);
  EXPECT_DOUBLE_EQ(keep_probability(4, 0, 1.0), 0.25);
}

// The kept fraction of each item's interactions must match (min_pop / pop)^gamma. For item i
// with N interactions, the kept count is Binomial(N, p_i), so the kept fraction has standard
// deviation sqrt(p_i (1 − p_i) / N). We allow 5 standard deviations per item: with 12 items
// the chance that an unbiased sampler fails any item is below 12 · 5.7e-7 ≈ 7e-6 per seed,
// and the seed is fixed, so the test is deterministic. A sampler with the wrong exponent
// (e.g. gamma 1 vs 0.5 at pop ratio 64 is 1/64 vs 1/8) misses by hundreds of deviations.
TEST(DebiasedSplitTest, KeepRateProportionalToInversePopularityPowerGamma) {
  const std::vector<uint64_t> degrees = {2, 0, 3, 5, 8, 13, 21, 34, 55, 89, 128, 4};
  // Item 1 has degree 0 -> treated as 1, so min_pop = 1 and item 1 is kept with p = 1.
  const std::size_t n_per_item = 40000;
  const auto held_out = PerItemInteractions(degrees.size(), n_per_item);
  for (double gamma : {1.0, 0.5, 2.0}) {
    SplitOptions opt;
    opt.gamma = gamma;
    opt.validation_fraction = 0.3;
    opt.seed = 12345;
    DebiasedSplit split;
    ASSERT_TRUE(debiased_split(held_out, degrees, opt, &split).ok());
    std::vector<std::size_t> kept(degrees.size(), 0);
    for (const auto& x : split.validation) ++kept[x.item];
    for (const auto& x : split.test) ++kept[x.item];
    for (std::size_t i = 0; i < degrees.size(); ++i) {
      const double pop = static_cast<double>(std::max<uint64_t>(degrees[i], 1));
      const double p = std::pow(1.0 / pop, gamma);
      const double fraction = static_cast<double>(kept[i]) / static_cast<double>(n_per_item);
      const double sd = std::sqrt(p * (1.0 - p) / static_cast<double>(n_per_item));
      EXPECT_NEAR(fraction, p, 5.0 * sd + 1e-12) << "gamma " << gamma << " item " << i;
    }
    EXPECT_EQ(kept[1], n_per_item);  // the most-kept item has probability exactly 1
  }
}

TEST(DebiasedSplitTest, PartitionsKeptInteractionsByFractionInInputOrder) {
  const std::vector<uint64_t> degrees = {1, 4, 16, 64};
  const auto held_out = PerItemInteractions(degrees.size(), 2500);
  SplitOptions opt;
  opt.validation_fraction = 0.25;
  opt.seed = 77;
  DebiasedSplit split;
  ASSERT_TRUE(debiased_split(held_out, degrees, opt, &split).ok());
  EXPECT_EQ(split.offered, held_out.size());
  EXPECT_EQ(split.kept, split.validation.size() + split.test.size());
  EXPECT_EQ(split.validation.size(),
            static_cast<std::size_t>(std::llround(0.25 * static_cast<double>(split.kept))));
  // Users are unique in the input, so they identify interactions: no overlap, input order.
  std::set<uint32_t> seen;
  for (const auto* part : {&split.validation, &split.test}) {
    for (std::size_t j = 0; j < part->size(); ++j) {
      EXPECT_TRUE(seen.insert((*part)[j].user).second);
      EXPECT_EQ((*part)[j], held_out[(*part)[j].user]);
      if (j > 0) {
        EXPECT_LT((*part)[j - 1].user, (*part)[j].user);
      }
    }
  }
  // Both parts carry every popularity level (the shuffle is not by item).
  std::set<uint32_t> val_items, test_items;
  for (const auto& x : split.validation) val_items.insert(x.item);
  for (const auto& x : split.test) test_items.insert(x.item);
  EXPECT_EQ(val_items.size(), 4u);
  EXPECT_EQ(test_items.size(), 4u);
}

TEST(DebiasedSplitTest, DeterministicPerSeed) {
  const std::vector<uint64_t> degrees = {1, 3, 9, 27, 81};
  const auto held_out = PerItemInteractions(degrees.size(), 400);
  SplitOptions opt;
  opt.seed = 2026;
  DebiasedSplit a, b, c;
  ASSERT_TRUE(debiased_split(held_out, degrees, opt, &a).ok());
  ASSERT_TRUE(debiased_split(held_out, degrees, opt, &b).ok());
  opt.seed = 2027;
  ASSERT_TRUE(debiased_split(held_out, degrees, opt, &c).ok());
  EXPECT_EQ(a.validation, b.validation);
  EXPECT_EQ(a.test, b.test);
  EXPECT_NE(a.validation, c.validation);
}

TEST(DebiasedSplitTest, GammaZeroKeepsEverythingAndFractionExtremes) {
  const std::vector<uint64_t> degrees = {1, 50};
  const auto held_out = PerItemInteractions(2, 100);
  SplitOptions opt;
  opt.gamma = 0.0;
  opt.validation_fraction = 1.0;
  DebiasedSplit split;
  ASSERT_TRUE(debiased_split(held_out, degrees, opt, &split).ok());
  EXPECT_EQ(split.validation, held_out);
  EXPECT_TRUE(split.test.empty());
  opt.validation_fraction = 0.0;
  ASSERT_TRUE(debiased_split(held_out, degrees, opt, &split).ok());
  EXPECT_EQ(split.test, held_out);
  EXPECT_TRUE(split.validation.empty());
  ASSERT_TRUE(debiased_split({}, degrees, opt, &split).ok());
  EXPECT_EQ(split.kept, 0u);
}

TEST(DebiasedSplitTest, RejectsInvalidInputAndLeavesOutputAlone) {
  const std::vector<uint64_t> degrees = {1, 2};
  DebiasedSplit split;
  split.kept = 99;
  SplitOptions opt;
  const std::vector<Interaction> bad = {{0, 0}, {1, 2}};
  EXPECT_EQ(debiased_split(bad, degrees, opt, &split).code(), Status::Code::kInvalidArgument);
  const std::vector<Interaction> good = {{0, 0}, {1, 1}};
  opt.gamma = -1.0;
  EXPECT_EQ(debiased_split(good, degrees, opt, &split).code(), Status::Code::kInvalidArgument);
  opt.gamma = NAN;
  EXPECT_EQ(debiased_split(good, degrees, opt, &split).code(), Status::Code::kInvalidArgument);
  opt.gamma = 1.0;
  opt.validation_fraction = 1.5;
  EXPECT_EQ(debiased_split(good, degrees, opt, &split).code(), Status::Code::kInvalidArgument);
  EXPECT_EQ(split.kept, 99u);
}

}  // namespace
}  // namespace plumb
