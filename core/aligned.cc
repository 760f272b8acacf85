#include "core/aligned.h"

#include <cstring>
#include <limits>
#include <string>

namespace plumb {
namespace {

// nullptr on exhaustion or overflow; zeroed memory otherwise. n == 0 gives nullptr too.
float* AllocateZeroed(std::size_t n) {
  if (n == 0) return nullptr;
  if (n > std::numeric_limits<std::size_t>::max() / sizeof(float)) return nullptr;
  void* p = ::operator new[](n * sizeof(float), std::align_val_t{AlignedFloats::kAlignment},
                             std::nothrow);
  if (p == nullptr) return nullptr;
  std::memset(p, 0, n * sizeof(float));
  return static_cast<float*>(p);
}

}  // namespace

AlignedFloats::AlignedFloats(std::size_t n) {
  if (n == 0) return;
  float* p = AllocateZeroed(n);
  if (p == nullptr) throw std::bad_alloc();
  data_.reset(p);
  size_ = n;
}

Status AlignedFloats::Allocate(std::size_t n, AlignedFloats* out) {
  if (n == 0) {
    *out = AlignedFloats();
    return Status::Ok();
  }
  float* p = AllocateZeroed(n);
  if (p == nullptr) {
    return Status::ResourceExhausted("cannot allocate " + std::to_string(n) + " aligned floats");
  }
  out->data_.reset(p);
  out->size_ = n;
  return Status::Ok();
}

ItemMatrix::ItemMatrix(std::size_t rows, std::size_t dim) {
  if (dim != 0 && rows > std::numeric_limits<std::size_t>::max() / dim) throw std::bad_alloc();
  values_ = AlignedFloats(rows * dim);
  rows_ = rows;
  dim_ = dim;
}

Status ItemMatrix::Create(std::size_t rows, std::size_t dim, ItemMatrix* out) {
  if (dim != 0 && rows > std::numeric_limits<std::size_t>::max() / dim) {
    return Status::ResourceExhausted("item matrix of " + std::to_string(rows) + " x " +
                                     std::to_string(dim) + " floats overflows");
  }
  AlignedFloats values;
  PLUMB_RETURN_IF_ERROR(AlignedFloats::Allocate(rows * dim, &values));
  out->values_ = std::move(values);
  out->rows_ = rows;
  out->dim_ = dim;
  return Status::Ok();
}

}  // namespace plumb
