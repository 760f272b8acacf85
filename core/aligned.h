// Cache-line aligned float storage and row-major matrix views.
//
// The serving scan reads an item matrix of rows x dim float32 values from start to end; a
// 64-byte aligned start keeps every vector load inside one cache line when dim is a multiple
// of 16 and lets the compiler use aligned loads. These types own or view that memory; they do
// no arithmetic.
#pragma once

#include <cstddef>
#include <cstdint>
#include <memory>
#include <new>
#include <span>

#include "core/status.h"

namespace plumb {

// A fixed-size, zero-initialised array of floats whose first element is 64-byte aligned.
// Move-only: copying 25 MB by accident is a bug, so the copy operations are deleted.
// Not thread-safe for concurrent writes; concurrent reads of a buffer nobody writes are fine.
class AlignedFloats {
 public:
  static constexpr std::size_t kAlignment = 64;

  // An empty buffer (size() == 0, data() == nullptr).
  AlignedFloats() = default;

  // Allocates n zeroed floats. Throws std::bad_alloc when memory is exhausted, like
  // std::vector; use Allocate() where an exception must not escape.
  explicit AlignedFloats(std::size_t n);

  // Allocates n zeroed floats into *out (replacing its contents). Returns ResourceExhausted
  // when the allocation fails (or n * sizeof(float) overflows); *out is then left unchanged.
  static Status Allocate(std::size_t n, AlignedFloats* out);

  AlignedFloats(AlignedFloats&&) noexcept = default;
  AlignedFloats& operator=(AlignedFloats&&) noexcept = default;
  AlignedFloats(const AlignedFloats&) = delete;
  AlignedFloats& operator=(const AlignedFloats&) = delete;

  float* data() { return data_.get(); }
  const float* data() const { return data_.get(); }
  std::size_t size() const { return size_; }
  bool empty() const { return size_ == 0; }
  float& operator[](std::size_t i) { return data_[i]; }
  float operator[](std::size_t i) const { return data_[i]; }
  std::span<float> span() { return {data_.get(), size_}; }
  std::span<const float> span() const { return {data_.get(), size_}; }

 private:
  struct AlignedDelete {
    void operator()(float* p) const noexcept {
      ::operator delete[](p, std::align_val_t{kAlignment});
    }
  };
  std::unique_ptr<float[], AlignedDelete> data_;
  std::size_t size_ = 0;
};

// A read-only view of a row-major float32 matrix: row r occupies
// data[r * dim, (r + 1) * dim). Does not own the memory; the owner must keep it alive and
// unchanged while the view is used. Cheap to copy; safe to share between threads.
struct MatrixView {
  const float* data = nullptr;
  std::size_t rows = 0;
  std::size_t dim = 0;

  std::span<const float> row(std::size_t r) const { return {data + r * dim, dim}; }
  std::span<const float> all() const { return {data, rows * dim}; }
};

// An owned row-major float32 matrix (rows x dim) on 64-byte aligned storage: the layout the
// scorer scans. Rows are packed (stride == dim). Move-only. Not thread-safe for concurrent
// writes; once filled it may be read from many threads through view().
class ItemMatrix {
 public:
  ItemMatrix() = default;

  // rows x dim zeros. Throws std::bad_alloc on exhaustion; see Create() otherwise.
  ItemMatrix(std::size_t rows, std::size_t dim);

  // rows x dim zeros into *out. ResourceExhausted if the memory cannot be had or
  // rows * dim overflows; *out unchanged on error.
  static Status Create(std::size_t rows, std::size_t dim, ItemMatrix* out);

  ItemMatrix(ItemMatrix&&) noexcept = default;
  ItemMatrix& operator=(ItemMatrix&&) noexcept = default;
  ItemMatrix(const ItemMatrix&) = delete;
  ItemMatrix& operator=(const ItemMatrix&) = delete;

  std::size_t rows() const { return rows_; }
  std::size_t dim() const { return dim_; }
  float* data() { return values_.data(); }
  const float* data() const { return values_.data(); }
  std::span<float> mutable_row(std::size_t r) { return {values_.data() + r * dim_, dim_}; }
  std::span<const float> row(std::size_t r) const { return {values_.data() + r * dim_, dim_}; }
  MatrixView view() const { return MatrixView{values_.data(), rows_, dim_}; }

 private:
  AlignedFloats values_;
  std::size_t rows_ = 0;
  std::size_t dim_ = 0;
};

}  // namespace plumb
