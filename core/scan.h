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

// One query of a batched scan: what top_k_by_dot takes, minus the matrix and the scratch.
// Non-owning; everything referenced must outlive the top_k_by_dot_batch call.
struct ScanTask {
  std::span<const float> query;
  Exclusions excluded;
  TopKSelector* selector = nullptr;
  ScanOutcome* outcome = nullptr;
  StopCheck should_stop;
};

// The most tasks one top_k_by_dot_batch call takes (it keeps per-task state on the stack).
inline constexpr std::size_t kMaxScanBatch = 16;

// Several top_k_by_dot queries in one pass over the matrix. Blocks are scratch.size() / 2 rows
// (the scratch holds two score buffers); each block is read once and scored against every
// task while it is still in cache, two tasks at a time so each row load serves both. Every
// task ends exactly as top_k_by_dot would leave it: same scores bit for bit (same per-lane
// arithmetic), same pushes in the same order, same stop semantics (its should_stop is asked
// before each block after the first; a stopped task leaves the batch and the others go on).
// Allocates nothing. Thread-safe given distinct selectors, outcomes and scratch.
// Errors: InvalidArgument if tasks.size() > kMaxScanBatch, the scratch holds fewer than 2
// floats, or any task fails top_k_by_dot's checks; no selector is touched then.
Status top_k_by_dot_batch(MatrixView items, std::span<const ScanTask> tasks,
                          std::span<float> scratch);

// Scratch floats for top_k_by_dot_batch: two buffers of 512 rows; at dim 64 a block is 128 KB
// of item data, which stays in L2 while every task of the batch scores it.
inline constexpr std::size_t kBatchScanScratch = 2 * 512;

// As top_k_by_dot, scoring by cosine similarity <row, query> / (|row| |query|) with
// norms[r] = |row r| precomputed by row_norms(). A row with zero norm scores 0 (cosine is
// undefined there; treated as orthogonal, so it ranks below any positively similar row).
// Errors: as top_k_by_dot, plus InvalidArgument if norms.size() < items.rows or the query
// has zero norm or is not finite.
Status top_k_by_cosine(MatrixView items, std::span<const float> norms, std::span<const float> query,
                       const Exclusions& excluded, std::span<float> scratch, TopKSelector* selector,
                       ScanOutcome* outcome, StopCheck should_stop = {});

}  // namespace plumb
