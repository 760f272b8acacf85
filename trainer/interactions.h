// Interactions: the training data of one model. Observed (user, item) pairs with dense
// indexes, kept three ways at once because the trainer needs all three:
//   - the pairs in insertion order, so that "pick an observed interaction uniformly" is one
//     random index and the online trainer can name new pairs by their position;
//   - per-user sorted item lists, so that "has u interacted with i?" (asked several times per
//     CPR sample and per negative draw) is a binary search in one small contiguous array;
//   - item degrees (training popularity), for metrics and popularity groups.
//
// Sorted vectors were chosen over hash sets for the membership test: bench_trainer's
// BM_Membership asks both the sampler's question (random observed user, random item) on a
// 20k x 10k world with 500k pairs; the sorted vector answered about 8.4M queries per CPU
// second against 5.7M for std::unordered_set (2026-12, loaded 2-core machine), and takes a
// fraction of the memory.
//
// Pairs are unique: adding a pair already present changes nothing. Appending is supported
// at any time (online); nothing is ever removed.
#pragma once

#include <cstddef>
#include <cstdint>
#include <span>
#include <vector>

#include "core/status.h"

namespace plumb::trainer {

// One observed interaction, by dense indexes.
struct Pair {
  uint32_t user = 0;
  uint32_t item = 0;
  friend bool operator==(const Pair&, const Pair&) = default;
};

// Largest accepted dense index + 1. Keeps index arithmetic far from overflow.
inline constexpr uint32_t kMaxIndex = 1u << 31;

// Copyable and movable. Not thread-safe for writes: concurrent const calls are fine, but no
// method may run while Add/AddAll/EnsureShape runs (the trainer appends between steps).
class Interactions {
 public:
  Interactions() = default;

  // Builds from a list of pairs in one pass (faster than repeated Add for an import): sorts
  // each user's items, drops duplicates (keeping the first occurrence's position), and
  // declares at least num_users x num_items indexes.
  // Errors: InvalidArgument if an index is >= kMaxIndex; *out unchanged then.
  static Status Build(std::span<const Pair> pairs, uint32_t num_users, uint32_t num_items,
                      Interactions* out);

  // Declares that users [0, num_users) and items [0, num_items) exist even if they have no
  // interaction yet (e.g. a catalogue item never borrowed). Never shrinks.
  // Errors: InvalidArgument if either is > kMaxIndex.
  Status EnsureShape(uint32_t num_users, uint32_t num_items);

  // Adds (user, item) unless already present. *added (may be null) says whether it was new;
  // a new pair gets index size() - 1 in pairs(). Grows the shape to cover both indexes.
  // Cost: O(log d + d) for a user with d items (insert into a sorted vector).
  // Errors: InvalidArgument if an index is >= kMaxIndex; nothing changes then.
  Status Add(uint32_t user, uint32_t item, bool* added = nullptr);

  // Adds every pair (as Add, in order). If new_indexes is not null, the pairs() indexes of
  // the pairs that were new are appended to it. Errors: as Add; pairs before the bad one
  // stay added, so validate first when all-or-nothing matters.
  Status AddAll(std::span<const Pair> pairs, std::vector<uint64_t>* new_indexes = nullptr);

  // Whether (user, item) is observed. Out-of-range indexes are simply not observed.
  bool Contains(uint32_t user, uint32_t item) const {
    if (user >= user_items_.size()) return false;
    return ContainsSorted(user_items_[user], item);
  }

  // All pairs in insertion order. The span is invalidated by the next Add.
  std::span<const Pair> pairs() const { return pairs_; }
  const Pair& pair(uint64_t index) const { return pairs_[index]; }
  size_t size() const { return pairs_.size(); }
  bool empty() const { return pairs_.empty(); }

  // The items of a user, ascending. Empty for unknown users.
  std::span<const uint32_t> items_of(uint32_t user) const {
    if (user >= user_items_.size()) return {};
    return user_items_[user];
  }
  uint32_t user_degree(uint32_t user) const {
    return user < user_items_.size() ? static_cast<uint32_t>(user_items_[user].size()) : 0;
  }
  uint32_t item_degree(uint32_t item) const {
    return item < item_degrees_.size() ? item_degrees_[item] : 0;
  }
  // Degrees of items [0, num_items()).
  std::span<const uint32_t> item_degrees() const { return item_degrees_; }

  // Index space: one more than the largest index seen or declared.
  uint32_t num_users() const { return static_cast<uint32_t>(user_items_.size()); }
  uint32_t num_items() const { return static_cast<uint32_t>(item_degrees_.size()); }
  // Users / items with at least one interaction.
  uint32_t num_active_users() const { return active_users_; }
  uint32_t num_active_items() const { return active_items_; }

  // Binary search in a sorted list; exposed for samplers that hold a list already.
  static bool ContainsSorted(std::span<const uint32_t> sorted, uint32_t x);

 private:
  std::vector<Pair> pairs_;
  std::vector<std::vector<uint32_t>> user_items_;
  std::vector<uint32_t> item_degrees_;
  uint32_t active_users_ = 0;
  uint32_t active_items_ = 0;
};

}  // namespace plumb::trainer
