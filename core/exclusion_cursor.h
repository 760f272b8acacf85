// ExclusionCursor: the scans' walk over a sorted exclusion list alongside the blocks of rows
// (core/scan.cc). Internal to core/.
#pragma once

#include <cstddef>
#include <limits>

#include "core/scan.h"

namespace plumb::scan_internal {

inline constexpr float kNaN = std::numeric_limits<float>::quiet_NaN();

// Walks the exclusions alongside the blocks: both are visited in ascending row order, so the
// sorted-list cursor only moves forward over the whole scan.
class ExclusionCursor {
 public:
  explicit ExclusionCursor(const Exclusions& e) : e_(e) {}

  // Marks excluded rows of block [begin, end) with NaN in scores (scores[0] is row begin);
  // TopKSelector never keeps a NaN.
  void MarkBlock(std::size_t begin, std::size_t end, float* scores) {
    const std::size_t bits = e_.bitmap.size() * 64;
    if (begin < bits) {
      const std::size_t stop = std::min(end, bits);
      std::size_t r = begin;
      while (r < stop) {
        const std::size_t word_index = r / 64;
        uint64_t word = e_.bitmap[word_index] >> (r % 64);
        const std::size_t word_end = std::min(stop, (word_index + 1) * 64);
        while (word != 0) {
          const std::size_t hit = r + static_cast<std::size_t>(std::countr_zero(word));
          if (hit >= word_end) break;
          scores[hit - begin] = kNaN;
          word &= word - 1;
        }
        r = word_end;
      }
    }
    const auto& list = e_.sorted_rows;
    while (next_ < list.size() && list[next_] < begin) ++next_;
    while (next_ < list.size() && list[next_] < end) {
      scores[list[next_] - begin] = kNaN;
      ++next_;
    }
  }

 private:
  const Exclusions& e_;
  std::size_t next_ = 0;
};

}  // namespace plumb::scan_internal
