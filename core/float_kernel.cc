#include "core/float_kernel.h"

#include <cstring>

#include "core/scan_clones.h"

namespace plumb::scan_internal {
namespace {

// Eight float lanes as a GCC/Clang vector type: the compiler lowers it to two SSE registers on
// baseline x86-64 and to one AVX register in the AVX2 clone below. Plain loops would not
// vectorise a float reduction without -ffast-math (reassociation changes rounding); with
// explicit lanes the summation order is ours and fixed.
typedef float Lanes __attribute__((vector_size(32)));
constexpr std::size_t kLanes = 8;

// The helpers take and give Lanes by reference: passing a 32-byte vector by value has an ABI
// that differs with and without AVX, which GCC warns about (-Wpsabi).
inline void LoadLanes(const float* p, Lanes& v) {
  std::memcpy(&v, p, sizeof(v));  // unaligned-safe; compiles to vector loads
}

// Lane sum in a fixed tree, ((v0+v1)+(v2+v3)) + ((v4+v5)+(v6+v7)): the same tree that
// SumEightRows applies to each of its rows, so a row scores identically on either path.
inline float SumLanes(const Lanes& v) {
  return ((v[0] + v[1]) + (v[2] + v[3])) + ((v[4] + v[5]) + (v[6] + v[7]));
}

// Out lane i = SumLanes(a[i]) for eight accumulators at once, by a transpose-and-add tree
// (7 vector adds, 14 shuffles) instead of eight separate horizontal sums.
inline void SumEightRows(const Lanes (&a)[8], Lanes& out) {
#if defined(__clang__)
  // Clang spells the shuffle differently; the plain form rounds the same way.
  for (int i = 0; i < 8; ++i) out[i] = SumLanes(a[i]);
#else
  typedef int Index __attribute__((vector_size(32)));
  const Index even = {0, 8, 2, 10, 4, 12, 6, 14}, odd = {1, 9, 3, 11, 5, 13, 7, 15};
  // t01 = [x0+x1, y0+y1, x2+x3, y2+y3, x4+x5, y4+y5, x6+x7, y6+y7] for rows x = 0, y = 1.
  const Lanes t01 = __builtin_shuffle(a[0], a[1], even) + __builtin_shuffle(a[0], a[1], odd);
  const Lanes t23 = __builtin_shuffle(a[2], a[3], even) + __builtin_shuffle(a[2], a[3], odd);
  const Lanes t45 = __builtin_shuffle(a[4], a[5], even) + __builtin_shuffle(a[4], a[5], odd);
  const Lanes t67 = __builtin_shuffle(a[6], a[7], even) + __builtin_shuffle(a[6], a[7], odd);
  // u = [(r0 low half), r1, r2, r3, (r0 high half), r1, r2, r3], each half summed in pairs.
  const Index lo = {0, 1, 8, 9, 4, 5, 12, 13}, hi = {2, 3, 10, 11, 6, 7, 14, 15};
  const Lanes u = __builtin_shuffle(t01, t23, lo) + __builtin_shuffle(t01, t23, hi);
  const Lanes v = __builtin_shuffle(t45, t67, lo) + __builtin_shuffle(t45, t67, hi);
  const Index first = {0, 1, 2, 3, 8, 9, 10, 11}, second = {4, 5, 6, 7, 12, 13, 14, 15};
  out = __builtin_shuffle(u, v, first) + __builtin_shuffle(u, v, second);
#endif
}

}  // namespace

// ScoreRows: out[r] = <rows[r], q> for r < n, eight rows at a time with one
// accumulator each and one transposed horizontal sum per eight rows. The item rows are read
// once, front to back, so the scan runs close to the speed of reading memory.
// Two clones (core/scan_clones.h).
PLUMB_SCAN_CLONES
void ScoreRows(const float* rows, std::size_t n, std::size_t dim, const float* q, float* out) {
  const std::size_t full = dim - dim % kLanes;
  std::size_t r = 0;
  for (; r + 8 <= n; r += 8) {
    const float* base = rows + r * dim;
    Lanes a[8] = {};
    // Row by row, so each row's 4 cache lines (at dim 64) are read consecutively, which the
    // hardware prefetcher follows best; the eight independent accumulators still let the
    // out-of-order core overlap the rows' add chains. Measured ~15% faster than stepping
    // all eight rows together through the dimensions.
    for (std::size_t i = 0; i < 8; ++i) {
      const float* row = base + i * dim;
      for (std::size_t d = 0; d < full; d += kLanes) {
        Lanes x, qv;
        LoadLanes(row + d, x);
        LoadLanes(q + d, qv);
        a[i] += x * qv;
      }
    }
    Lanes sums;
    SumEightRows(a, sums);
    for (std::size_t i = 0; i < 8; ++i) {
      float s = sums[i];
      for (std::size_t d = full; d < dim; ++d) s += base[i * dim + d] * q[d];
      out[r + i] = s;
    }
  }
  for (; r < n; ++r) {
    const float* row = rows + r * dim;
    Lanes a = {};
    for (std::size_t d = 0; d < full; d += kLanes) {
      Lanes x, qv;
      LoadLanes(row + d, x);
      LoadLanes(q + d, qv);
      a += x * qv;
    }
    float s = SumLanes(a);
    for (std::size_t d = full; d < dim; ++d) s += row[d] * q[d];
    out[r] = s;
  }
}

// One dot product with the same arithmetic as ScoreRows (same lanes, same order), so a
// gathered score equals the scanned score of the same row bit for bit.
float DotRow(const float* row, std::size_t dim, const float* q) {
  float s;
  ScoreRows(row, 1, dim, q, &s);
  return s;
}

}  // namespace plumb::scan_internal
