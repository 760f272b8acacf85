// The int8 side of the pruned scans (core/scan.cc): rows and queries quantised to int8 codes
// with one scale each, the integer dot products of codes, and the rounding helper of the
// error bounds. QuantizedItems (core/scan.h) is built here. Internal to core/; callers use
// core/scan.h.
#pragma once

#include <cmath>
#include <cstddef>
#include <cstdint>
#include <span>

namespace plumb::scan_internal {

// out[r] = sum_j codes[r * stride + j] * q[j] for r < n, exact in int32. Rows and query are
// stride bytes, zero padded (stride a multiple of 16).
void CodeDots(const int8_t* codes, std::size_t n, std::size_t stride, const int8_t* q,
              int32_t* out);

// A float no smaller than the non-negative double v.
float RoundUp(double v);

// The pruned scan's bounds take norms from sums of squares in double: sqrt in double is
// correctly rounded, and this relative margin covers the rounding of the sums themselves (n
// terms in double are within n * 2^-53 relative, halved by the square root: below 1e-12 up to
// about 18,000 dimensions).
inline constexpr double kSumOfSquaresMargin = 1.0 + 1e-12;

// sqrt(sum_sq) rounded up to a float, with kSumOfSquaresMargin: a norm the bounds can trust.
inline float RoundUpNorm(double sum_sq) { return RoundUp(std::sqrt(sum_sq) * kSumOfSquaresMargin); }

// One vector quantised the way the pruned scan's bounds assume: scale = max|v_j| / 127 (in
// float), code_j = v_j / scale rounded to nearest and clamped to [-127, 127] (all 0 when the
// vector is 0), residual e = v - scale * code. What the bounds need, in double:
struct RowQuantization {
  float scale = 0.0f;
  double residual_sq = 0.0;  // |e|^2
  double norm_sq = 0.0;      // |v|^2
};

// Writes v's codes to codes[0, v.size()) (the padding is the caller's) and fills *out.
// False, with nothing written, when v holds a non-finite value.
bool QuantizeRow(std::span<const float> v, int8_t* codes, RowQuantization* out);

}  // namespace plumb::scan_internal
