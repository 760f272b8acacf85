#include "core/aligned.h"

#include <gtest/gtest.h>

#include <cstdint>
#include <limits>
#include <type_traits>
#include <utility>

namespace plumb {
namespace {

bool IsAligned64(const void* p) { return reinterpret_cast<std::uintptr_t>(p) % 64 == 0; }

TEST(AlignedFloatsTest, AllocatesZeroedAlignedStorage) {
  for (std::size_t n : {1u, 3u, 16u, 1000u, 100001u}) {
    AlignedFloats buf(n);
    ASSERT_EQ(buf.size(), n);
    EXPECT_TRUE(IsAligned64(buf.data())) << n;
    for (std::size_t i = 0; i < n; ++i) ASSERT_EQ(buf[i], 0.0f) << i;
  }
}

TEST(AlignedFloatsTest, EmptyBufferHasNoStorage) {
  AlignedFloats buf;
  EXPECT_TRUE(buf.empty());
  EXPECT_EQ(buf.data(), nullptr);
  AlignedFloats zero(0);
  EXPECT_EQ(zero.data(), nullptr);
}

TEST(AlignedFloatsTest, MoveTransfersOwnership) {
  static_assert(!std::is_copy_constructible_v<AlignedFloats>);
  static_assert(!std::is_copy_assignable_v<AlignedFloats>);
  AlignedFloats a(8);
  a[5] = 2.5f;
  const float* p = a.data();
  AlignedFloats b(std::move(a));
  EXPECT_EQ(b.data(), p);
  EXPECT_EQ(b[5], 2.5f);
  AlignedFloats c;
  c = std::move(b);
  EXPECT_EQ(c.data(), p);
  EXPECT_EQ(c.size(), 8u);
}

TEST(AlignedFloatsTest, AllocateReportsExhaustionAsStatus) {
  AlignedFloats buf(4);
  buf[0] = 1.0f;
  // More floats than the address space can hold: must fail cleanly and leave buf unchanged.
  Status s = AlignedFloats::Allocate(std::numeric_limits<std::size_t>::max() / 2, &buf);
  EXPECT_EQ(s.code(), Status::Code::kResourceExhausted) << s.ToString();
  EXPECT_EQ(buf.size(), 4u);
  EXPECT_EQ(buf[0], 1.0f);
  ASSERT_TRUE(AlignedFloats::Allocate(10, &buf).ok());
  EXPECT_EQ(buf.size(), 10u);
  EXPECT_TRUE(IsAligned64(buf.data()));
}

TEST(ItemMatrixTest, RowsAreContiguousAndViewMatches) {
  ItemMatrix m(5, 3);
  EXPECT_TRUE(IsAligned64(m.data()));
  for (std::size_t r = 0; r < 5; ++r) {
    auto row = m.mutable_row(r);
    for (std::size_t d = 0; d < 3; ++d) row[d] = static_cast<float>(10 * r + d);
  }
  MatrixView v = m.view();
  EXPECT_EQ(v.rows, 5u);
  EXPECT_EQ(v.dim, 3u);
  EXPECT_EQ(v.row(4)[2], 42.0f);
  EXPECT_EQ(v.all()[3 * 2 + 1], 21.0f);  // row 2, column 1 in row-major order
}

TEST(ItemMatrixTest, CreateRejectsOverflow) {
  ItemMatrix m;
  Status s = ItemMatrix::Create(std::numeric_limits<std::size_t>::max() / 2, 4, &m);
  EXPECT_EQ(s.code(), Status::Code::kResourceExhausted);
  EXPECT_EQ(m.rows(), 0u);
  ASSERT_TRUE(ItemMatrix::Create(7, 2, &m).ok());
  EXPECT_EQ(m.rows(), 7u);
  EXPECT_EQ(m.row(6).size(), 2u);
}

}  // namespace
}  // namespace plumb
