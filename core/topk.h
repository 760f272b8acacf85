// Bounded selection of the k highest-scoring indices without sorting everything.
#pragma once

#include <cmath>
#include <cstddef>
#include <cstdint>
#include <limits>
#include <span>
#include <vector>

namespace plumb {

// One candidate: an item (row) index and its score.
struct ScoredIndex {
  uint32_t index = 0;
  float score = 0.0f;

  friend bool operator==(const ScoredIndex&, const ScoredIndex&) = default;
};

// The ranking order used everywhere in plumb: higher score first, and on equal scores the
// smaller index first, so results are deterministic whatever the scan order.
inline bool ranks_before(const ScoredIndex& a, const ScoredIndex& b) {
  return a.score > b.score || (a.score == b.score && a.index < b.index);
}

// Keeps the k best candidates (order of ranks_before) among those pushed, in a bounded
// min-heap whose root is the worst kept candidate. Push is O(1) for a candidate that does not
// beat the current threshold (the common case in a scan) and O(log k) otherwise.
//
// Candidates with a NaN score are ignored, so a corrupt row can never be recommended; the
// scan also uses NaN to mark excluded rows. +/-inf scores are ordinary values.
//
// Memory: Reset(k) reserves k slots; later Reset calls with k no larger than any earlier one
// allocate nothing, and neither do Push and SortedResult. One selector per thread: not
// thread-safe; reuse one per worker to keep the request path allocation-free.
class TopKSelector {
 public:
  TopKSelector() = default;
  explicit TopKSelector(std::size_t k) { Reset(k); }

  // Forgets all candidates and sets the bound to k (k == 0 keeps nothing).
  void Reset(std::size_t k);

  std::size_t k() const { return k_; }
  // Number of candidates currently kept (<= k).
  std::size_t size() const { return heap_.size(); }
  bool full() const { return heap_.size() == k_; }

  // The score a candidate must reach to be considered once the selector is full: the
  // worst kept score. -inf while not full (everything non-NaN is admitted then).
  float threshold() const { return threshold_; }

  // Offers a candidate. Index values need not be distinct, but the scan never repeats one.
  void Push(uint32_t index, float score) {
    // Fast path: strictly below the worst kept score can never enter. NaN fails this test
    // and is rejected in PushSlow.
    if (score < threshold_) return;
    PushSlow(index, score);
  }

  // The kept candidates, best first (ranks_before order). The span points into storage
  // owned by the selector and stays valid until the next Reset or Push; the selector's
  // contents are unchanged, so more pushes may follow.
  std::span<const ScoredIndex> SortedResult();

 private:
  void PushSlow(uint32_t index, float score);
  void SiftDown(std::size_t pos);
  void SiftUp(std::size_t pos);

  std::size_t k_ = 0;
  float threshold_ = -std::numeric_limits<float>::infinity();
  std::vector<ScoredIndex> heap_;    // heap_[0] is the worst kept candidate
  std::vector<ScoredIndex> sorted_;  // SortedResult's output buffer, capacity reused
};

}  // namespace plumb
