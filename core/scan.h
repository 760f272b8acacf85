// Exact scoring of an item matrix against one query vector: a blocked dot-product scan that
// feeds a TopKSelector, skipping excluded rows and checking a stop signal between blocks.
//
// 100k items x 64 dims is 25 MB of floats, far beyond cache, so the scan is bound by memory
// bandwidth: each block of rows is scored into a small caller-provided buffer that stays in
// L1/L2, and selection runs over that buffer before the next block is read.
#pragma once

#include <cstddef>
#include <cstdint>
#include <span>
#include <type_traits>
#include <utility>
#include <vector>

#include "core/aligned.h"
#include "core/status.h"
#include "core/topk.h"

namespace plumb {

// Rows that a scan must never return (already-seen items, request exclusions). Either part
// may be empty; a row is excluded if either part names it. Non-owning.
struct Exclusions {
  // Bit (r % 64) of word r / 64 set means row r is excluded. Rows beyond the bitmap's end are
  // not excluded by it.
  std::span<const uint64_t> bitmap;
  // Excluded rows in ascending order (duplicates allowed); entries >= rows are ignored.
  // Callers with several lists (seen items, request exclusions) merge them first.
  std::span<const uint32_t> sorted_rows;
};

// A non-owning reference to a callable returning bool, asked once per block whether the scan
// should stop (e.g. the gRPC deadline has passed or the call was cancelled). A default
// StopCheck never stops. The referenced callable must outlive every call through the
// StopCheck; passing a lambda directly as a function argument is safe. Calling it is as
// thread-safe as the callable it refers to.
class StopCheck {
 public:
  StopCheck() = default;

  // Wraps any callable that returns something convertible to bool (not another StopCheck).
  template <typename F,
            typename = std::enable_if_t<!std::is_same_v<std::remove_cvref_t<F>, StopCheck> &&
                                        std::is_invocable_r_v<bool, std::remove_reference_t<F>&>>>
  StopCheck(F&& f)  // NOLINT(google-explicit-constructor): meant to wrap lambdas implicitly
      : callable_(const_cast<void*>(static_cast<const void*>(std::addressof(f)))),
        call_([](void* c) -> bool {
          return static_cast<bool>((*static_cast<std::remove_reference_t<F>*>(c))());
        }) {}

  bool operator()() const { return call_ != nullptr && call_(callable_); }

 private:
  void* callable_ = nullptr;
  bool (*call_)(void*) = nullptr;
};

// Rows per block when the caller has no reason to choose: 1024 rows x 4 bytes of scores is
// 4 KB, and at dim 64 a block is 256 KB of item data.
inline constexpr std::size_t kDefaultScanBlockRows = 1024;

// What a top-k scan did.
struct ScanOutcome {
  // True if the StopCheck asked to stop before every row was scored; the selector then holds
  // the best of the rows_scanned first rows only.
  bool stopped_early = false;
  // Rows scored (excluded rows included in the count), a multiple of the block size unless
  // the scan reached the end.
  std::size_t rows_scanned = 0;
  // Rows whose exact float score was computed: for top_k_by_dot / top_k_by_cosine every row
  // scanned (excluded ones included); for top_k_by_dot_pruned only the non-excluded rows its
  // bound could not rule out (how well the pruning worked).
  std::size_t rows_scored_exactly = 0;
};

// scores[r] = <items.row(r), query> for every r < items.rows.
// Errors: InvalidArgument if query.size() != items.dim or scores.size() < items.rows;
// nothing is written then. Allocates nothing. Thread-safe (touches only its arguments).
Status dot_scores(MatrixView items, std::span<const float> query, std::span<float> scores);

// scores[j] = <items.row(rows[j]), query>, for re-ranking a candidate list.
// Errors: InvalidArgument if query.size() != items.dim, scores.size() < rows.size(), or any
// rows[j] >= items.rows; nothing is written then. Allocates nothing. Thread-safe.
Status gather_dot_scores(MatrixView items, std::span<const uint32_t> rows,
                         std::span<const float> query, std::span<float> scores);

// norms[r] = Euclidean norm of items.row(r), for top_k_by_cosine. Computed once per model
// version, not per request.
// Errors: InvalidArgument if norms.size() < items.rows. Thread-safe.
Status row_norms(MatrixView items, std::span<float> norms);

// Scans items in blocks of scratch.size() rows (use kDefaultScanBlockRows), scoring each row
// by <row, query> and pushing every non-excluded row into *selector as (row index, score).
// The selector is NOT reset first, so a caller may scan several shards into one selector
// (indices are row numbers within `items`); call selector->Reset(k) before a fresh query.
// should_stop is called before each block after the first; when it returns true the scan
// stops and outcome->stopped_early is set. The first block is always scored so a request with
// an already-expired deadline still gets the result of one block.
// Allocates nothing. Thread-safe given distinct selectors and scratch buffers.
// Errors: InvalidArgument if query.size() != items.dim, scratch is empty while items.rows
// > 0, items.rows > 2^32 (indices are 32-bit), or selector/outcome is null; the selector is
// untouched then.
Status top_k_by_dot(MatrixView items, std::span<const float> query, const Exclusions& excluded,
                    std::span<float> scratch, TopKSelector* selector, ScanOutcome* outcome,
                    StopCheck should_stop = {});

// An int8 copy of an item matrix, with per-row bounds on what the rounding lost, so that
// top_k_by_dot_pruned can rule most rows out with a cheap integer dot product and compute the
// exact float score only for rows that might enter the top K. A quarter of the matrix's size
// (dim rounded up to 16 bytes per row, plus 12 bytes of per-row constants). Built once per
// model version; immutable afterwards, so any number of threads may read it.
class QuantizedItems {
 public:
  QuantizedItems() = default;

  // Row r becomes codes q_r = round(x_r / s_r) with s_r = max_j |x_rj| / 127, and the exact
  // Euclidean norms of x_r and of the residual x_r - s_r q_r (computed in double, rounded up
  // to float) are kept as bounds.
  // Errors: InvalidArgument if a value is not finite or dim > 65536 (int32 sums could
  // overflow); ResourceExhausted if the memory cannot be had. *out is unchanged on error.
  static Status Build(MatrixView items, QuantizedItems* out);

  std::size_t rows() const { return rows_; }
  std::size_t dim() const { return dim_; }
  std::size_t bytes() const;

 private:
  friend Status top_k_by_dot_pruned(MatrixView, const QuantizedItems&, std::span<const float>,
                                    const Exclusions&, std::span<float>, TopKSelector*,
                                    ScanOutcome*, StopCheck);
  friend Status top_k_by_cosine_pruned(MatrixView, const QuantizedItems&, std::span<const float>,
                                       std::span<const float>, const Exclusions&, std::span<float>,
                                       TopKSelector*, ScanOutcome*, StopCheck);
  std::size_t rows_ = 0, dim_ = 0, stride_ = 0;  // stride_: dim rounded up to 16
  std::vector<int8_t> codes_;                    // rows_ x stride_, zero padded
  std::vector<float> scale_;                     // s_r
  std::vector<float> residual_norm_;             // >= |x_r - s_r q_r|
  std::vector<float> norm_;                      // >= |x_r|
};

// Exactly what top_k_by_dot leaves in the selector (the same rows with the same float scores,
// bit for bit), found with less arithmetic. The query is rounded to int8 the same way; for
// each row the integer dot product gives an estimate and a rigorous error bound
// (Cauchy-Schwarz on both residuals, plus the float rounding of the exact scan), and the row's
// exact score is computed only if estimate + bound reaches the selector's current threshold.
// A row it skips scores strictly below the K-th best score, so it could never have been kept.
// The selector is not reset first; should_stop is asked before each block after the first,
// as in top_k_by_dot (blocks of scratch.size() rows). Allocates nothing. Thread-safe given
// distinct selectors and scratch.
// Errors: as top_k_by_dot, plus InvalidArgument if `codes` was not built from a matrix of
// this shape or the query is not finite.
Status top_k_by_dot_pruned(MatrixView items, const QuantizedItems& codes,
                           std::span<const float> query, const Exclusions& excluded,
                           std::span<float> scratch, TopKSelector* selector, ScanOutcome* outcome,
                           StopCheck should_stop = {});

// top_k_by_cosine's answer (bit for bit) by the same pruning as top_k_by_dot_pruned; norms are
// the ones top_k_by_cosine takes. Errors: those of top_k_by_cosine and top_k_by_dot_pruned.
Status top_k_by_cosine_pruned(MatrixView items, const QuantizedItems& codes,
                              std::span<const float> norms, std::span<const float> query,
                              const Exclusions& excluded, std::span<float> scratch,
                              TopKSelector* selector, ScanOutcome* outcome,
                              StopCheck should_stop = {});

// As top_k_by_dot, scoring by cosine similarity <row, query> / (|row| |query|) with
// norms[r] = |row r| precomputed by row_norms(). A row with zero norm scores 0 (cosine is
// undefined there; treated as orthogonal, so it ranks below any positively similar row).
// Errors: as top_k_by_dot, plus InvalidArgument if norms.size() < items.rows or the query
// has zero norm or is not finite.
Status top_k_by_cosine(MatrixView items, std::span<const float> norms, std::span<const float> query,
                       const Exclusions& excluded, std::span<float> scratch, TopKSelector* selector,
                       ScanOutcome* outcome, StopCheck should_stop = {});

}  // namespace plumb
