// Embeddings: the matrix-factorisation backbone. Every user and every item has a row of
// `dim` float32 values; the score of a pair is the dot product of the two rows, with no bias
// terms (CPR relies on their absence: additive user and item terms cancel in its margin).
//
// Rows are stored in two row-major Eigen matrices so that one row is contiguous (the
// trainer touches a handful of rows per sample, the scorer scans the item matrix row by
// row). New users and items appear online, so both matrices can grow; existing rows are
// kept (warm start) and new rows are initialised from the seed and their own index only,
// so growing in several steps gives the same values as creating the full size at once.
#pragma once

#include <Eigen/Core>
#include <cstdint>
#include <span>

#include "core/aligned.h"
#include "core/status.h"

namespace plumb::trainer {

using RowMatrix = Eigen::Matrix<float, Eigen::Dynamic, Eigen::Dynamic, Eigen::RowMajor>;

// Which of the two matrices a row belongs to.
enum class Side : uint8_t { kUser = 0, kItem = 1 };

// Largest supported dimension: objectives keep per-sample gradients for a few rows on the
// stack, and no ranking model in this service needs more.
inline constexpr uint32_t kMaxDim = 1024;

// Default standard deviation factor of the initial values: each coordinate is drawn from
// N(0, (init_scale^2) / dim), so a fresh row has norm about init_scale and a fresh score is
// about init_scale^2 / sqrt(dim). Small random normal initialisation (0.1 / sqrt(dim) per
// coordinate) is common practice for matrix factorisation trained by SGD; the value is from
// memory, not from a specific paper.
inline constexpr float kDefaultInitScale = 0.1f;

// <a, b> over n floats. Uses Eigen's vectorised reduction.
inline float Dot(const float* a, const float* b, uint32_t n) {
  return Eigen::Map<const Eigen::VectorXf>(a, n).dot(Eigen::Map<const Eigen::VectorXf>(b, n));
}

// Copyable (a copy is a deep copy of both matrices). Not thread-safe: concurrent reads are
// fine; concurrent writes to distinct rows are what Hogwild training does (see trainer.h)
// and are the caller's responsibility; Grow() must never run concurrently with anything.
class Embeddings {
 public:
  // An empty model (dim 0, no rows). Use Create or FromMatrices.
  Embeddings() = default;

  // Builds num_users x dim and num_items x dim matrices, every row drawn from
  // N(0, init_scale^2 / dim) with a generator derived from (seed, side, row index).
  // Errors: InvalidArgument if dim is 0 or above kMaxDim, or init_scale is negative or not
  // finite; *out is unchanged then.
  static Status Create(uint32_t dim, uint32_t num_users, uint32_t num_items, uint64_t seed,
                       Embeddings* out, float init_scale = kDefaultInitScale);

  // Adopts existing matrices (e.g. a stored version, for warm start). Rows added later by
  // Grow are initialised from `seed`.
  // Errors: InvalidArgument if the column counts differ, are 0 or above kMaxDim, or any
  // value is not finite; *out is unchanged then.
  static Status FromMatrices(RowMatrix users, RowMatrix items, uint64_t seed, Embeddings* out,
                             float init_scale = kDefaultInitScale);

  // Ensures at least num_users user rows and num_items item rows. Never shrinks; existing
  // rows keep their values. Row pointers obtained before are invalidated when a matrix grows.
  // Errors: FailedPrecondition on a model without a dimension (default-constructed);
  // ResourceExhausted if memory runs out (the model is unchanged then).
  Status Grow(uint32_t num_users, uint32_t num_items);

  uint32_t dim() const { return dim_; }
  uint32_t num_users() const { return static_cast<uint32_t>(users_.rows()); }
  uint32_t num_items() const { return static_cast<uint32_t>(items_.rows()); }
  uint64_t seed() const { return seed_; }
  float init_scale() const { return init_scale_; }

  // Row access. Indexes are not checked in release builds (hot path); callers check against
  // num_users()/num_items(). The pointers stay valid until the next Grow.
  float* user_row(uint32_t u) { return users_.data() + static_cast<size_t>(u) * dim_; }
  const float* user_row(uint32_t u) const { return users_.data() + static_cast<size_t>(u) * dim_; }
  float* item_row(uint32_t i) { return items_.data() + static_cast<size_t>(i) * dim_; }
  const float* item_row(uint32_t i) const { return items_.data() + static_cast<size_t>(i) * dim_; }
  float* row(Side side, uint32_t r) { return side == Side::kUser ? user_row(r) : item_row(r); }
  const float* row(Side side, uint32_t r) const {
    return side == Side::kUser ? user_row(r) : item_row(r);
  }

  // s(u, i) = <p_u, q_i>.
  float Score(uint32_t u, uint32_t i) const { return Dot(user_row(u), item_row(i), dim_); }

  const RowMatrix& users() const { return users_; }
  const RowMatrix& items() const { return items_; }
  // Direct mutable access (tests, loading). Resizing them through these pointers is not
  // allowed; use Grow.
  RowMatrix* mutable_users() { return &users_; }
  RowMatrix* mutable_items() { return &items_; }

  // Read-only views in core's layout, for the top-K scan. Valid until the next Grow.
  MatrixView user_view() const { return {users_.data(), num_users(), dim_}; }
  MatrixView item_view() const { return {items_.data(), num_items(), dim_}; }

  // True if every value is finite (no NaN or infinity): a publish gate check.
  bool AllFinite() const;

  // Largest Euclidean row norm over both matrices (0 for an empty model).
  float MaxRowNorm() const;

 private:
  void InitRows(Side side, RowMatrix* m, uint32_t first_row);

  uint32_t dim_ = 0;
  uint64_t seed_ = 0;
  float init_scale_ = kDefaultInitScale;
  RowMatrix users_;
  RowMatrix items_;
};

}  // namespace plumb::trainer
