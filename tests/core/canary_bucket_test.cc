// CanaryBucket (core/canary_bucket.h): the published FNV-1a test vectors, the rule as another
// language computes it, and the properties a canary relies on (share, stability, widening).
#include "core/canary_bucket.h"

#include <gtest/gtest.h>

#include <cmath>
#include <string>
#include <vector>

namespace plumb {
namespace {

// FNV-1a 64-bit test vectors from the FNV reference (Fowler, Noll, Vo; IETF draft
// draft-eastlake-fnv), quoted from memory and confirmed with a separate Python implementation.
TEST(CanaryBucketTest, Fnv1a64MatchesThePublishedVectors) {
  EXPECT_EQ(Fnv1a64(""), 0xcbf29ce484222325ULL);
  EXPECT_EQ(Fnv1a64("a"), 0xaf63dc4c8601ec8cULL);
  EXPECT_EQ(Fnv1a64("foobar"), 0x85944171f73967e8ULL);
}

// The rule written out in the header, computed independently in Python 3 (big integers masked
// to 64 bits) when this test was written: clients in any language can predict the arm.
TEST(CanaryBucketTest, BucketsMatchAnIndependentImplementation) {
  EXPECT_EQ(CanaryBucket("member-1", 14), 9505u);
  EXPECT_EQ(CanaryBucket("member-2", 14), 4643u);
  EXPECT_EQ(CanaryBucket("member-1", 15), 3618u);
  EXPECT_EQ(CanaryBucket("", 1), 2992u);
  EXPECT_EQ(CanaryBucket("tool-99", 3), 7089u);
}

std::vector<std::string> Subjects(int n) {
  std::vector<std::string> out;
  for (int k = 0; k < n; ++k) out.push_back("user-" + std::to_string(k * 7919 + 13));
  return out;
}

// The share served is the setting: binomial, so within 4.5 standard deviations for every
// setting tried (sd = sqrt(p(1-p)/n)).
TEST(CanaryBucketTest, TheShareServedIsTheSetting) {
  const std::vector<std::string> subjects = Subjects(100000);
  for (uint64_t version : {1u, 2u, 77u, 123456u}) {
    for (uint32_t share_bp : {1u, 100u, 500u, 2500u, 5000u, 9900u, 10000u}) {
      int in = 0;
      for (const std::string& s : subjects) in += InCanary(s, version, share_bp) ? 1 : 0;
      const double p = share_bp / 10000.0;
      const double n = static_cast<double>(subjects.size());
      const double sd = std::sqrt(p * (1 - p) / n);
      EXPECT_NEAR(in / n, p, 4.5 * sd + 1e-12) << "version " << version << " share " << share_bp;
    }
  }
}

// Buckets are uniform: Pearson's chi-square over 100 equal bucket ranges stays below the 99.9th
// percentile of chi-square with 99 degrees of freedom (148.2, from standard tables).
TEST(CanaryBucketTest, BucketsAreUniform) {
  const std::vector<std::string> subjects = Subjects(200000);
  std::vector<double> counts(100, 0.0);
  for (const std::string& s : subjects) counts[CanaryBucket(s, 9) / 100] += 1;
  const double expected = subjects.size() / 100.0;
  double chi2 = 0;
  for (double c : counts) chi2 += (c - expected) * (c - expected) / expected;
  EXPECT_LT(chi2, 148.2);
}

// Widening keeps everyone already in; each candidate draws its own subset (the overlap of two
// 10 % subsets of different versions is about 10 % of one, as for independent draws).
TEST(CanaryBucketTest, WideningKeepsTheSubsetAndVersionsDrawTheirOwn) {
  const std::vector<std::string> subjects = Subjects(50000);
  int in_both_versions = 0, in_first = 0;
  for (const std::string& s : subjects) {
    if (InCanary(s, 5, 500)) {
      EXPECT_TRUE(InCanary(s, 5, 2000)) << s;
    }
    EXPECT_EQ(CanaryBucket(s, 5), CanaryBucket(s, 5));
    if (InCanary(s, 5, 1000)) {
      ++in_first;
      if (InCanary(s, 6, 1000)) ++in_both_versions;
    }
  }
  ASSERT_GT(in_first, 4000);
  EXPECT_NEAR(static_cast<double>(in_both_versions) / in_first, 0.10, 0.03);
  EXPECT_FALSE(InCanary("anyone", 5, 0));
  EXPECT_TRUE(InCanary("anyone", 5, 10000));
}

}  // namespace
}  // namespace plumb
