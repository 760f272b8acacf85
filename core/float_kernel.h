// The float scoring kernel of the scans (core/scan.cc): dot products of item rows with a
// query, eight rows at a time, in a fixed order of summation so that a row scores the same
// bits on every path (the block scan, a single gathered row, the AVX2 and the baseline
// clone). Internal to core/; callers use core/scan.h.
#pragma once

#include <cstddef>

namespace plumb::scan_internal {

// out[r] = <rows[r], q> for r < n; rows are n x dim, row-major, contiguous.
void ScoreRows(const float* rows, std::size_t n, std::size_t dim, const float* q, float* out);

// <row, q> with exactly ScoreRows' arithmetic, so a gathered score equals the scanned one.
float DotRow(const float* row, std::size_t dim, const float* q);

}  // namespace plumb::scan_internal
