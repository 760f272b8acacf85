// The scan drivers: the full float scans (dot, cosine) and the pruned exact scans over the
// int8 copy. The kernels they drive: core/float_kernel (float dot products),
// core/int8_kernel (QuantizedItems, int8 dot products, quantisation) and
// core/exclusion_cursor.h.
#include "core/scan.h"

#include <algorithm>
#include <cmath>
#include <cstring>
#include <limits>
#include <string>
#include <vector>

#include "core/exclusion_cursor.h"
#include "core/float_kernel.h"
#include "core/int8_kernel.h"

namespace plumb {
namespace {

using scan_internal::CodeDots;
using scan_internal::DotRow;
using scan_internal::ExclusionCursor;
using scan_internal::QuantizeRow;
using scan_internal::RoundUp;
using scan_internal::RoundUpNorm;
using scan_internal::RowQuantization;
using scan_internal::ScoreRows;

Status CheckScanArgs(MatrixView items, std::span<const float> query, std::span<float> scratch,
                     TopKSelector* selector, ScanOutcome* outcome) {
  if (selector == nullptr || outcome == nullptr) {
    return Status::InvalidArgument("scan needs a selector and an outcome");
  }
  if (query.size() != items.dim) {
    return Status::InvalidArgument("query has " + std::to_string(query.size()) +
                                   " dimensions, items have " + std::to_string(items.dim));
  }
  if (items.rows > std::size_t{std::numeric_limits<uint32_t>::max()} + 1) {
    return Status::InvalidArgument("scan indexes rows with 32 bits; " + std::to_string(items.rows) +
                                   " rows are too many");
  }
  if (scratch.empty() && items.rows > 0) {
    return Status::InvalidArgument("scan needs a non-empty scratch buffer");
  }
  return Status::Ok();
}

// Pushes the final scores of rows [begin, begin + n) into the selector; excluded rows
// carry NaN by now and are rejected.
void PushBlock(std::size_t begin, std::size_t n, const float* scores, TopKSelector* selector) {
  // The threshold is held in a local: through the pointer the compiler would reload it
  // for every row, since scores and the selector's float could alias.
  float threshold = selector->threshold();
  for (std::size_t i = 0; i < n; ++i) {
    if (scores[i] < threshold) continue;  // NaN falls through and Push rejects it
    selector->Push(static_cast<uint32_t>(begin + i), scores[i]);
    threshold = selector->threshold();
  }
}

// The shared block loop. `adjust(begin, n, scores)` turns raw dot products of rows
// [begin, begin + n) into final scores (identity for dot, normalisation for cosine).
template <typename Adjust>
void ScanBlocks(MatrixView items, std::span<const float> query, const Exclusions& excluded,
                std::span<float> scratch, TopKSelector* selector, ScanOutcome* outcome,
                StopCheck should_stop, Adjust adjust) {
  *outcome = ScanOutcome{};
  const std::size_t block = scratch.size();
  float* scores = scratch.data();
  ExclusionCursor cursor(excluded);
  for (std::size_t begin = 0; begin < items.rows; begin += block) {
    if (begin > 0 && should_stop()) {
      outcome->stopped_early = true;
      return;
    }
    const std::size_t n = std::min(block, items.rows - begin);
    ScoreRows(items.data + begin * items.dim, n, items.dim, query.data(), scores);
    adjust(begin, n, scores);
    cursor.MarkBlock(begin, begin + n, scores);
    PushBlock(begin, n, scores, selector);
    outcome->rows_scanned = begin + n;
    outcome->rows_scored_exactly = begin + n;
  }
}

// A row's cosine score from its float dot product, the same expression (hence the same bits)
// in the full and the pruned scan. A zero row scores 0.
inline float CosineScore(float dot, float inv_query_norm, float norm) {
  return norm > 0.0f ? dot * inv_query_norm / norm : 0.0f;
}

Status CheckNorms(MatrixView items, std::span<const float> norms) {
  if (norms.size() < items.rows) {
    return Status::InvalidArgument("norms hold " + std::to_string(norms.size()) +
                                   " values, items have " + std::to_string(items.rows) + " rows");
  }
  return Status::Ok();
}

// 1 / |query| for cosine scores, the same float for the full and the pruned scan.
Status InverseQueryNorm(std::span<const float> query, float* inv) {
  double qq = 0.0;
  for (float v : query) qq += double{v} * double{v};
  const double query_norm = std::sqrt(qq);
  if (!(query_norm > 0.0) || !std::isfinite(query_norm)) {
    return Status::InvalidArgument("cosine similarity needs a finite, non-zero query");
  }
  *inv = static_cast<float>(1.0 / query_norm);
  return Status::Ok();
}

// The pruned scan's bound constants. A row is rescored exactly when a bound on its score
// reaches the K-th best; every rounding the bound itself suffers is added back, so that no
// row that belongs in the top K is skipped.
//
// The full scan's own float rounding: a dot product of n terms summed in float is within
// about n * 2^-24 * sum |x_j u_j| <= n * 2^-24 |x| |u| of the real value; twice that, with
// the depth of the lane tree (16) added, covers ScoreRows' order of summation. Multiplied by
// |u| here and by |x| per row.
inline float FloatScanSlack(std::size_t dim) {
  return static_cast<float>((2.0 * static_cast<double>(dim) + 16.0) * std::ldexp(1.0, -24));
}
// The float arithmetic of the estimate and the bound (and, for cosine, of the normalisation):
// a few ulps each, covered by 1e-6 of their magnitude (an ulp of float is 2^-23 ~ 1.2e-7).
constexpr float kBoundRelativeSlack = 1e-6f;
// An absolute floor for bounds near zero, where a relative margin vanishes.
constexpr float kBoundAbsoluteSlack = 1e-30f;

struct CodeView {
  const int8_t* codes;
  std::size_t stride;
  const float* scale;
  const float* residual_norm;
  const float* norm;
};

// The shared body of the pruned scans. `finish(r, upper_dot)` turns a bound on row r's float
// dot product into a bound on its final score (identity for dot, the cosine normalisation with
// its rounding for cosine); `exact(r)` is the row's final score exactly as the full scan
// computes it.
template <typename Finish, typename Exact>
Status PrunedScan(MatrixView items, const CodeView& codes, std::span<const float> query,
                  const Exclusions& excluded, std::span<float> scratch, TopKSelector* selector,
                  ScanOutcome* outcome, StopCheck should_stop, Finish finish, Exact exact) {
  // The query quantised exactly as the rows are (QuantizeRow): u = t p + d.
  alignas(64) int8_t p[1024];   // the quantised query; larger dims use p_large
  std::vector<int8_t> p_large;  // allocates, but only for dim > 1024
  int8_t* pq = p;
  if (codes.stride > sizeof(p)) {
    p_large.assign(codes.stride, 0);
    pq = p_large.data();
  } else {
    std::fill(p, p + codes.stride, int8_t{0});
  }
  RowQuantization uq;
  if (!QuantizeRow(query, pq, &uq)) return Status::InvalidArgument("query has a non-finite value");
  const float t = uq.scale;
  double pp = 0.0;
  for (std::size_t j = 0; j < query.size(); ++j) pp += static_cast<double>(pq[j]) * pq[j];
  // x.u = s t (q.p) + t (e.p) + x.d, with e = x - s q and d = u - t p, so
  // |x.u - s t (q.p)| <= |e| t |p| + |x| |d| (Cauchy-Schwarz on each term).
  const float tp_norm = RoundUp(double{t} * std::sqrt(pp) * scan_internal::kSumOfSquaresMargin);
  const float d_norm = RoundUpNorm(uq.residual_sq);
  const float u_norm = RoundUpNorm(uq.norm_sq);
  const float scan_slack = FloatScanSlack(items.dim) * u_norm;

  *outcome = ScanOutcome{};
  const std::size_t block = scratch.size();
  float* upper = scratch.data();
  // Integer sums of one block; on the stack in chunks so that the call allocates nothing.
  constexpr std::size_t kChunk = 256;
  int32_t dots[kChunk];
  ExclusionCursor cursor(excluded);
  for (std::size_t begin = 0; begin < items.rows; begin += block) {
    if (begin > 0 && should_stop()) {
      outcome->stopped_early = true;
      return Status::Ok();
    }
    const std::size_t n = std::min(block, items.rows - begin);
    for (std::size_t c = 0; c < n; c += kChunk) {
      const std::size_t m = std::min(kChunk, n - c);
      const std::size_t first = begin + c;
      CodeDots(codes.codes + first * codes.stride, m, codes.stride, pq, dots);
      for (std::size_t i = 0; i < m; ++i) {
        const std::size_t r = first + i;
        const float estimate = codes.scale[r] * t * static_cast<float>(dots[i]);
        const float bound =
            codes.residual_norm[r] * tp_norm + codes.norm[r] * d_norm + codes.norm[r] * scan_slack;
        upper[c + i] =
            finish(r, estimate + bound + kBoundRelativeSlack * (std::fabs(estimate) + bound) +
                          kBoundAbsoluteSlack);
      }
    }
    cursor.MarkBlock(begin, begin + n, upper);
    float threshold = selector->threshold();
    for (std::size_t i = 0; i < n; ++i) {
      if (!(upper[i] >= threshold)) continue;  // cannot reach the K-th best, or excluded (NaN)
      const std::size_t r = begin + i;
      selector->Push(static_cast<uint32_t>(r), exact(r));
      ++outcome->rows_scored_exactly;
      threshold = selector->threshold();
    }
    outcome->rows_scanned = begin + n;
  }
  return Status::Ok();
}

Status CheckCodes(MatrixView items, std::size_t rows, std::size_t dim) {
  if (rows != items.rows || dim != items.dim) {
    return Status::InvalidArgument("quantised copy has " + std::to_string(rows) + " x " +
                                   std::to_string(dim) + ", items have " +
                                   std::to_string(items.rows) + " x " + std::to_string(items.dim));
  }
  return Status::Ok();
}

}  // namespace

Status dot_scores(MatrixView items, std::span<const float> query, std::span<float> scores) {
  if (query.size() != items.dim) {
    return Status::InvalidArgument("query has " + std::to_string(query.size()) +
                                   " dimensions, items have " + std::to_string(items.dim));
  }
  if (scores.size() < items.rows) {
    return Status::InvalidArgument("scores buffer holds " + std::to_string(scores.size()) +
                                   " values, need " + std::to_string(items.rows));
  }
  if (items.rows > 0) ScoreRows(items.data, items.rows, items.dim, query.data(), scores.data());
  return Status::Ok();
}

Status gather_dot_scores(MatrixView items, std::span<const uint32_t> rows,
                         std::span<const float> query, std::span<float> scores) {
  if (query.size() != items.dim) {
    return Status::InvalidArgument("query has " + std::to_string(query.size()) +
                                   " dimensions, items have " + std::to_string(items.dim));
  }
  if (scores.size() < rows.size()) {
    return Status::InvalidArgument("scores buffer holds " + std::to_string(scores.size()) +
                                   " values, need " + std::to_string(rows.size()));
  }
  for (uint32_t r : rows) {
    if (r >= items.rows) {
      return Status::InvalidArgument("row " + std::to_string(r) + " out of range (" +
                                     std::to_string(items.rows) + " rows)");
    }
  }
  for (std::size_t j = 0; j < rows.size(); ++j) {
    scores[j] = DotRow(items.data + std::size_t{rows[j]} * items.dim, items.dim, query.data());
  }
  return Status::Ok();
}

Status row_norms(MatrixView items, std::span<float> norms) {
  if (norms.size() < items.rows) {
    return Status::InvalidArgument("norms buffer holds " + std::to_string(norms.size()) +
                                   " values, need " + std::to_string(items.rows));
  }
  for (std::size_t r = 0; r < items.rows; ++r) {
    // Accumulate in double: norms are computed once per version, so precision is cheap.
    double s = 0.0;
    for (float v : items.row(r)) s += double{v} * double{v};
    norms[r] = static_cast<float>(std::sqrt(s));
  }
  return Status::Ok();
}

Status top_k_by_dot(MatrixView items, std::span<const float> query, const Exclusions& excluded,
                    std::span<float> scratch, TopKSelector* selector, ScanOutcome* outcome,
                    StopCheck should_stop) {
  PLUMB_RETURN_IF_ERROR(CheckScanArgs(items, query, scratch, selector, outcome));
  ScanBlocks(items, query, excluded, scratch, selector, outcome, should_stop,
             [](std::size_t, std::size_t, float*) {});
  return Status::Ok();
}

Status top_k_by_dot_pruned(MatrixView items, const QuantizedItems& codes,
                           std::span<const float> query, const Exclusions& excluded,
                           std::span<float> scratch, TopKSelector* selector, ScanOutcome* outcome,
                           StopCheck should_stop) {
  PLUMB_RETURN_IF_ERROR(CheckScanArgs(items, query, scratch, selector, outcome));
  PLUMB_RETURN_IF_ERROR(CheckCodes(items, codes.rows_, codes.dim_));
  const CodeView view{codes.codes_.data(), codes.stride_, codes.scale_.data(),
                      codes.residual_norm_.data(), codes.norm_.data()};
  return PrunedScan(
      items, view, query, excluded, scratch, selector, outcome, should_stop,
      [](std::size_t, float upper) { return upper; },
      [&](std::size_t r) { return DotRow(items.data + r * items.dim, items.dim, query.data()); });
}

Status top_k_by_cosine_pruned(MatrixView items, const QuantizedItems& codes,
                              std::span<const float> norms, std::span<const float> query,
                              const Exclusions& excluded, std::span<float> scratch,
                              TopKSelector* selector, ScanOutcome* outcome, StopCheck should_stop) {
  PLUMB_RETURN_IF_ERROR(CheckScanArgs(items, query, scratch, selector, outcome));
  PLUMB_RETURN_IF_ERROR(CheckCodes(items, codes.rows_, codes.dim_));
  PLUMB_RETURN_IF_ERROR(CheckNorms(items, norms));
  float inv_query_norm = 0.0f;
  PLUMB_RETURN_IF_ERROR(InverseQueryNorm(query, &inv_query_norm));
  const CodeView view{codes.codes_.data(), codes.stride_, codes.scale_.data(),
                      codes.residual_norm_.data(), codes.norm_.data()};
  return PrunedScan(
      items, view, query, excluded, scratch, selector, outcome, should_stop,
      // cos = dot / (|u| |x|) is increasing in dot, so a bound on dot bounds it; the two float
      // operations round by at most an ulp each, covered by 1e-6 relative. Zero rows score 0.
      [&](std::size_t r, float upper) {
        const float norm = norms[r];
        if (!(norm > 0.0f)) return 0.0f;
        const float c = upper * inv_query_norm / norm;
        return c + kBoundRelativeSlack * std::fabs(c) + kBoundAbsoluteSlack;
      },
      [&](std::size_t r) {
        return CosineScore(DotRow(items.data + r * items.dim, items.dim, query.data()),
                           inv_query_norm, norms[r]);
      });
}

Status top_k_by_cosine(MatrixView items, std::span<const float> norms, std::span<const float> query,
                       const Exclusions& excluded, std::span<float> scratch, TopKSelector* selector,
                       ScanOutcome* outcome, StopCheck should_stop) {
  PLUMB_RETURN_IF_ERROR(CheckScanArgs(items, query, scratch, selector, outcome));
  PLUMB_RETURN_IF_ERROR(CheckNorms(items, norms));
  float inv_query_norm = 0.0f;
  PLUMB_RETURN_IF_ERROR(InverseQueryNorm(query, &inv_query_norm));
  ScanBlocks(items, query, excluded, scratch, selector, outcome, should_stop,
             [&](std::size_t begin, std::size_t n, float* scores) {
               for (std::size_t i = 0; i < n; ++i) {
                 scores[i] = CosineScore(scores[i], inv_query_norm, norms[begin + i]);
               }
             });
  return Status::Ok();
}

}  // namespace plumb
