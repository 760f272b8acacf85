#include "core/int8_kernel.h"

#include <algorithm>
#include <cmath>
#if defined(__x86_64__)
#include <immintrin.h>
#endif
#include <limits>
#include <string>

#include "core/scan.h"
#include "core/scan_clones.h"

namespace plumb::scan_internal {
namespace {

// Integer dot products of int8 rows (stride bytes each, zero padded) with an int8 query:
// exact in int32, so every code path below gives the same sums.
//
// Portable path: plain loops the compiler vectorises in each clone.
PLUMB_SCAN_CLONES
void CodeDotsPortable(const int8_t* codes, std::size_t n, std::size_t stride, const int8_t* q,
                      int32_t* out) {
  for (std::size_t r = 0; r < n; ++r) {
    const int8_t* row = codes + r * stride;
    int32_t acc = 0;
    for (std::size_t j = 0; j < stride; ++j) acc += int32_t{row[j]} * int32_t{q[j]};
    out[r] = acc;
  }
}

#if defined(__x86_64__) && (defined(__GNUC__) || defined(__clang__))
#define PLUMB_HAVE_AVX2_CODE_DOTS 1
// AVX2 path for strides that are multiples of 32 (the compiler's own vectorisation of the
// loop above was measured 3x slower: it reduces every row horizontally on its own).
// maddubs multiplies unsigned by signed bytes, so each row chunk a enters as |a| and the
// query as sign(p, a) (p negated where a < 0, zeroed where a == 0): |a| * sign(p, a) = a * p.
// Adjacent pairs sum to int16 without saturation since |a|, |p| <= 127 (2 * 127^2 < 2^15);
// madd with ones widens them to int32. Eight rows are reduced together by horizontal adds.
__attribute__((target("avx2"))) void CodeDotsAvx2(const int8_t* codes, std::size_t n,
                                                  std::size_t stride, const int8_t* q,
                                                  int32_t* out) {
  const __m256i ones = _mm256_set1_epi16(1);
  std::size_t r = 0;
  for (; r + 8 <= n; r += 8) {
    __m256i acc[8];
    for (std::size_t i = 0; i < 8; ++i) {
      const int8_t* row = codes + (r + i) * stride;
      acc[i] = _mm256_setzero_si256();
      for (std::size_t c = 0; c < stride; c += 32) {
        const __m256i a = _mm256_loadu_si256(reinterpret_cast<const __m256i*>(row + c));
        const __m256i p = _mm256_loadu_si256(reinterpret_cast<const __m256i*>(q + c));
        const __m256i pairs = _mm256_maddubs_epi16(_mm256_abs_epi8(a), _mm256_sign_epi8(p, a));
        acc[i] = _mm256_add_epi32(acc[i], _mm256_madd_epi16(pairs, ones));
      }
    }
    const __m256i s01 = _mm256_hadd_epi32(acc[0], acc[1]);
    const __m256i s23 = _mm256_hadd_epi32(acc[2], acc[3]);
    const __m256i s45 = _mm256_hadd_epi32(acc[4], acc[5]);
    const __m256i s67 = _mm256_hadd_epi32(acc[6], acc[7]);
    // Each 128-bit half of s0123 holds partial sums of rows 0..3; of s4567, rows 4..7.
    const __m256i s0123 = _mm256_hadd_epi32(s01, s23);
    const __m256i s4567 = _mm256_hadd_epi32(s45, s67);
    const __m256i lo = _mm256_permute2x128_si256(s0123, s4567, 0x20);
    const __m256i hi = _mm256_permute2x128_si256(s0123, s4567, 0x31);
    _mm256_storeu_si256(reinterpret_cast<__m256i*>(out + r), _mm256_add_epi32(lo, hi));
  }
  if (r < n) CodeDotsPortable(codes + r * stride, n - r, stride, q, out + r);
}
#endif

}  // namespace

void CodeDots(const int8_t* codes, std::size_t n, std::size_t stride, const int8_t* q,
              int32_t* out) {
#if defined(PLUMB_HAVE_AVX2_CODE_DOTS)
  static const bool avx2 = __builtin_cpu_supports("avx2");
  if (avx2 && stride % 32 == 0) {
    CodeDotsAvx2(codes, n, stride, q, out);
    return;
  }
#endif
  CodeDotsPortable(codes, n, stride, q, out);
}

namespace {

// x rounded to the nearest int8 code of step `scale` (> 0), within [-127, 127].
int8_t Code(double x, double scale) {
  const double c = std::nearbyint(x / scale);
  return static_cast<int8_t>(std::clamp(c, -127.0, 127.0));
}

}  // namespace

float RoundUp(double v) {
  float f = static_cast<float>(v);
  if (static_cast<double>(f) < v) f = std::nextafter(f, std::numeric_limits<float>::infinity());
  return f;
}

bool QuantizeRow(std::span<const float> v, int8_t* codes, RowQuantization* out) {
  float max_abs = 0.0f;
  for (float x : v) {
    if (!std::isfinite(x)) return false;
    max_abs = std::max(max_abs, std::fabs(x));
  }
  RowQuantization q;
  q.scale = max_abs / 127.0f;
  for (std::size_t j = 0; j < v.size(); ++j) {
    const double x = v[j];
    q.norm_sq += x * x;
    codes[j] = q.scale > 0.0f ? Code(x, q.scale) : int8_t{0};
    const double e = x - static_cast<double>(q.scale) * codes[j];  // exact in double
    q.residual_sq += e * e;
  }
  *out = q;
  return true;
}

}  // namespace plumb::scan_internal

namespace plumb {

using scan_internal::QuantizeRow;
using scan_internal::RoundUpNorm;
using scan_internal::RowQuantization;

Status QuantizedItems::Build(MatrixView items, QuantizedItems* out) {
  if (items.dim > 65536) {
    return Status::InvalidArgument("quantised scoring supports at most 65536 dimensions, got " +
                                   std::to_string(items.dim));
  }
  QuantizedItems q;
  q.rows_ = items.rows;
  q.dim_ = items.dim;
  q.stride_ = (items.dim + 15) / 16 * 16;
  try {
    q.codes_.assign(q.rows_ * q.stride_, 0);
    q.scale_.resize(q.rows_);
    q.residual_norm_.resize(q.rows_);
    q.norm_.resize(q.rows_);
  } catch (const std::bad_alloc&) {
    return Status::ResourceExhausted("cannot allocate the int8 copy of " +
                                     std::to_string(items.rows) + " rows");
  }
  for (std::size_t r = 0; r < q.rows_; ++r) {
    RowQuantization row;
    if (!QuantizeRow(items.row(r), q.codes_.data() + r * q.stride_, &row)) {
      return Status::InvalidArgument("row " + std::to_string(r) + " has a non-finite value");
    }
    q.scale_[r] = row.scale;
    q.residual_norm_[r] = RoundUpNorm(row.residual_sq);
    q.norm_[r] = RoundUpNorm(row.norm_sq);
  }
  *out = std::move(q);
  return Status::Ok();
}

std::size_t QuantizedItems::bytes() const {
  return codes_.size() + sizeof(float) * (scale_.size() + residual_norm_.size() + norm_.size());
}

}  // namespace plumb
