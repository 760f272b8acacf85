#include "core/topk.h"

#include <algorithm>

namespace plumb {

void TopKSelector::Reset(std::size_t k) {
  k_ = k;
  heap_.clear();
  if (heap_.capacity() < k) heap_.reserve(k);
  sorted_.clear();
  // With k == 0 the selector is full from the start; PushSlow rejects everything.
  threshold_ = -std::numeric_limits<float>::infinity();
}

void TopKSelector::PushSlow(uint32_t index, float score) {
  if (std::isnan(score) || k_ == 0) return;
  const ScoredIndex candidate{index, score};
  if (heap_.size() < k_) {
    heap_.push_back(candidate);
    SiftUp(heap_.size() - 1);
    if (heap_.size() == k_) threshold_ = heap_[0].score;
    return;
  }
  // Full: the candidate enters only if it ranks before the worst kept one. Equal scores
  // reach here too (the fast path lets them through) and are decided by index.
  if (!ranks_before(candidate, heap_[0])) return;
  heap_[0] = candidate;
  SiftDown(0);
  threshold_ = heap_[0].score;
}

// Heap order: a parent never ranks before its children, so heap_[0] is the worst kept.
void TopKSelector::SiftUp(std::size_t pos) {
  const ScoredIndex item = heap_[pos];
  while (pos > 0) {
    const std::size_t parent = (pos - 1) / 2;
    if (!ranks_before(heap_[parent], item)) break;
    heap_[pos] = heap_[parent];
    pos = parent;
  }
  heap_[pos] = item;
}

void TopKSelector::SiftDown(std::size_t pos) {
  const std::size_t n = heap_.size();
  const ScoredIndex item = heap_[pos];
  while (true) {
    std::size_t child = 2 * pos + 1;
    if (child >= n) break;
    // Pick the worse of the two children.
    if (child + 1 < n && ranks_before(heap_[child], heap_[child + 1])) ++child;
    if (!ranks_before(item, heap_[child])) break;
    heap_[pos] = heap_[child];
    pos = child;
  }
  heap_[pos] = item;
}

std::span<const ScoredIndex> TopKSelector::SortedResult() {
  if (sorted_.capacity() < k_) sorted_.reserve(k_);
  sorted_.assign(heap_.begin(), heap_.end());
  std::sort(sorted_.begin(), sorted_.end(), ranks_before);
  return sorted_;
}

}  // namespace plumb
