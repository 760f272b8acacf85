#include "trainer/embeddings.h"

#include <cmath>
#include <new>
#include <string>
#include <utility>

#include "trainer/rng.h"

namespace plumb::trainer {

namespace {

Status CheckDim(Eigen::Index dim) {
  if (dim <= 0 || dim > static_cast<Eigen::Index>(kMaxDim)) {
    return Status::InvalidArgument("embedding dimension must be in 1.." + std::to_string(kMaxDim) +
                                   ", got " + std::to_string(dim));
  }
  return Status::Ok();
}

Status CheckScale(float init_scale) {
  if (!std::isfinite(init_scale) || init_scale < 0.0f) {
    return Status::InvalidArgument("init_scale must be finite and >= 0");
  }
  return Status::Ok();
}

}  // namespace

Status Embeddings::Create(uint32_t dim, uint32_t num_users, uint32_t num_items, uint64_t seed,
                          Embeddings* out, float init_scale) {
  PLUMB_RETURN_IF_ERROR(CheckDim(dim));
  PLUMB_RETURN_IF_ERROR(CheckScale(init_scale));
  Embeddings e;
  e.dim_ = dim;
  e.seed_ = seed;
  e.init_scale_ = init_scale;
  e.users_.resize(0, dim);
  e.items_.resize(0, dim);
  PLUMB_RETURN_IF_ERROR(e.Grow(num_users, num_items));
  *out = std::move(e);
  return Status::Ok();
}

Status Embeddings::FromMatrices(RowMatrix users, RowMatrix items, uint64_t seed, Embeddings* out,
                                float init_scale) {
  PLUMB_RETURN_IF_ERROR(CheckScale(init_scale));
  if (users.cols() != items.cols()) {
    return Status::InvalidArgument("user and item matrices differ in dimension (" +
                                   std::to_string(users.cols()) + " vs " +
                                   std::to_string(items.cols()) + ")");
  }
  PLUMB_RETURN_IF_ERROR(CheckDim(users.cols()));
  if (!users.allFinite() || !items.allFinite()) {
    return Status::InvalidArgument("embedding matrices contain NaN or infinite values");
  }
  Embeddings e;
  e.dim_ = static_cast<uint32_t>(users.cols());
  e.seed_ = seed;
  e.init_scale_ = init_scale;
  e.users_ = std::move(users);
  e.items_ = std::move(items);
  *out = std::move(e);
  return Status::Ok();
}

void Embeddings::InitRows(Side side, RowMatrix* m, uint32_t first_row) {
  const double stddev = static_cast<double>(init_scale_) / std::sqrt(static_cast<double>(dim_));
  for (Eigen::Index r = first_row; r < m->rows(); ++r) {
    // One stream per (side, row): a row's initial value does not depend on how the matrix
    // grew to include it.
    Rng rng(mix_seed(seed_, static_cast<uint64_t>(side) + 1, static_cast<uint64_t>(r)));
    float* row = m->data() + r * dim_;
    for (uint32_t j = 0; j < dim_; ++j) row[j] = static_cast<float>(rng.Normal() * stddev);
  }
}

Status Embeddings::Grow(uint32_t num_users, uint32_t num_items) {
  if (dim_ == 0)
    return Status::FailedPrecondition("Grow on an embedding model without a dimension");
  const uint32_t old_users = this->num_users();
  const uint32_t old_items = this->num_items();
  try {
    // Allocate both before touching either so that a failure leaves the model unchanged.
    RowMatrix new_users, new_items;
    if (num_users > old_users) {
      new_users.resize(num_users, dim_);
      new_users.topRows(old_users) = users_;
    }
    if (num_items > old_items) {
      new_items.resize(num_items, dim_);
      new_items.topRows(old_items) = items_;
    }
    if (num_users > old_users) {
      users_ = std::move(new_users);
      InitRows(Side::kUser, &users_, old_users);
    }
    if (num_items > old_items) {
      items_ = std::move(new_items);
      InitRows(Side::kItem, &items_, old_items);
    }
  } catch (const std::bad_alloc&) {
    return Status::ResourceExhausted("out of memory growing embeddings to " +
                                     std::to_string(num_users) + " users x " +
                                     std::to_string(num_items) + " items");
  }
  return Status::Ok();
}

bool Embeddings::AllFinite() const { return users_.allFinite() && items_.allFinite(); }

float Embeddings::MaxRowNorm() const {
  float best = 0.0f;
  if (users_.rows() > 0) best = std::max(best, users_.rowwise().norm().maxCoeff());
  if (items_.rows() > 0) best = std::max(best, items_.rowwise().norm().maxCoeff());
  return best;
}

}  // namespace plumb::trainer
