#include "trainer/embeddings.h"

#include <gtest/gtest.h>

#include <cmath>

namespace plumb::trainer {
namespace {

TEST(Embeddings, CreateIsDeterministicAndScaled) {
  Embeddings a, b, c;
  ASSERT_TRUE(Embeddings::Create(64, 300, 200, 42, &a).ok());
  ASSERT_TRUE(Embeddings::Create(64, 300, 200, 42, &b).ok());
  ASSERT_TRUE(Embeddings::Create(64, 300, 200, 43, &c).ok());
  EXPECT_EQ(a.users(), b.users());
  EXPECT_EQ(a.items(), b.items());
  EXPECT_NE(a.users(), c.users());
  // Coordinates ~ N(0, 0.1^2 / 64): the sample standard deviation over 32000 values is
  // within a few percent of 0.1 / 8.
  const double n = static_cast<double>(a.users().size());
  const double mean = a.users().cast<double>().sum() / n;
  const double var = (a.users().cast<double>().array() - mean).square().sum() / n;
  EXPECT_NEAR(mean, 0.0, 0.001);
  EXPECT_NEAR(std::sqrt(var), 0.1 / 8.0, 0.0005);
  EXPECT_TRUE(a.AllFinite());
  // Users and items are drawn from different streams.
  EXPECT_NE(a.users().row(0), a.items().row(0));
}

TEST(Embeddings, GrowKeepsRowsAndInitialisesLikeAFreshModel) {
  Embeddings grown, full;
  ASSERT_TRUE(Embeddings::Create(16, 10, 5, 7, &grown).ok());
  // Training changes existing rows; growing must keep those values (warm start).
  grown.mutable_users()->row(3).setConstant(2.5f);
  ASSERT_TRUE(grown.Grow(12, 5).ok());
  ASSERT_TRUE(grown.Grow(25, 9).ok());
  ASSERT_TRUE(grown.Grow(20, 3).ok());  // never shrinks
  EXPECT_EQ(grown.num_users(), 25u);
  EXPECT_EQ(grown.num_items(), 9u);
  EXPECT_TRUE((grown.users().row(3).array() == 2.5f).all());
  ASSERT_TRUE(Embeddings::Create(16, 25, 9, 7, &full).ok());
  // New rows depend only on (seed, side, row): same as if created at full size.
  for (uint32_t u = 10; u < 25; ++u) EXPECT_EQ(grown.users().row(u), full.users().row(u));
  for (uint32_t i = 0; i < 9; ++i) EXPECT_EQ(grown.items().row(i), full.items().row(i));
  EXPECT_EQ(grown.users().row(0), full.users().row(0));
}

TEST(Embeddings, RejectsBadInput) {
  Embeddings e;
  EXPECT_EQ(Embeddings::Create(0, 1, 1, 1, &e).code(), Status::Code::kInvalidArgument);
  EXPECT_EQ(Embeddings::Create(kMaxDim + 1, 1, 1, 1, &e).code(), Status::Code::kInvalidArgument);
  EXPECT_EQ(e.Grow(3, 3).code(), Status::Code::kFailedPrecondition);
  RowMatrix u(2, 4), i(3, 5);
  u.setZero();
  i.setZero();
  EXPECT_EQ(Embeddings::FromMatrices(u, i, 1, &e).code(), Status::Code::kInvalidArgument);
  RowMatrix i4(3, 4);
  i4.setZero();
  i4(1, 2) = std::nanf("");
  EXPECT_EQ(Embeddings::FromMatrices(u, i4, 1, &e).code(), Status::Code::kInvalidArgument);
  i4(1, 2) = 1.0f;
  ASSERT_TRUE(Embeddings::FromMatrices(u, i4, 1, &e).ok());
  EXPECT_EQ(e.dim(), 4u);
  EXPECT_FLOAT_EQ(e.Score(0, 1), 0.0f);
  EXPECT_FLOAT_EQ(e.MaxRowNorm(), 1.0f);
}

TEST(Embeddings, ScoreIsDotProduct) {
  Embeddings e;
  ASSERT_TRUE(Embeddings::Create(3, 1, 1, 1, &e).ok());
  e.user_row(0)[0] = 1;
  e.user_row(0)[1] = 2;
  e.user_row(0)[2] = 3;
  e.item_row(0)[0] = 4;
  e.item_row(0)[1] = -5;
  e.item_row(0)[2] = 6;
  EXPECT_FLOAT_EQ(e.Score(0, 0), 4 - 10 + 18);
  EXPECT_EQ(e.item_view().rows, 1u);
  EXPECT_EQ(e.item_view().dim, 3u);
  EXPECT_EQ(e.item_view().data, e.item_row(0));
}

}  // namespace
}  // namespace plumb::trainer
