// TrainingState: what a trainer knows about the data, kept in memory and derived from the
// store's event log — the external-id dictionaries, the training interactions, and the
// held-out validation pairs. Both the offline `plumb fit` and the online plumb-train fold
// events in through Apply() and persist what changed through CollectChanges(), which fills a
// store::StateChange to be committed atomically with a version and the cursor.
//
// Hold-out: a (user, item) pair goes to validation when a 64-bit FNV-1a hash of
// "user\0item" falls below holdout_fraction · 2^64. The hash depends only on the external
// ids, so the decision is stable across restarts and repeated events of the same pair.
// Held-out pairs are never trained on and are not written to the store's interaction sets.
//
// Training window (optional): with a window W, a (user, item) pair trains only while its latest
// event is within W of the newest event timestamp seen (the stream's own clock, so that a
// replayed or backfilled history behaves as it did live). Compact() drops pairs (training and
// held-out) that left the window; the store keeps them (its interaction sets are the users'
// histories, which serving still needs). A pair that comes back is trained again.
//
// Not thread-safe: one owner (the training thread) calls everything.
#pragma once

#include <cstdint>
#include <span>
#include <string>
#include <string_view>
#include <unordered_map>
#include <unordered_set>
#include <vector>

#include "core/status.h"
#include "store/store.h"
#include "trainer/interactions.h"

namespace plumb::online {

// Append-only map between external ids and dense indexes.
class IdDictionary {
 public:
  // The index of `external`, assigning the next one when new (*created set accordingly).
  uint32_t Intern(std::string_view external, bool* created);
  // The index of `external`, or false when unknown.
  bool Find(std::string_view external, uint32_t* index) const;
  const std::string& name(uint32_t index) const { return names_[index]; }
  const std::vector<std::string>& names() const { return names_; }
  uint32_t size() const { return static_cast<uint32_t>(names_.size()); }

 private:
  std::unordered_map<std::string, uint32_t> index_;
  std::vector<std::string> names_;
};

// True when the pair is held out for validation at this fraction (see the file comment).
bool IsHeldOut(std::string_view user, std::string_view item, double holdout_fraction);

class TrainingState {
 public:
  explicit TrainingState(double holdout_fraction = 0.0) : holdout_fraction_(holdout_fraction) {}

  // Rebuilds the state of `store` as of its cursor: loads the dictionaries (so indexes match
  // the store's), takes the events that retention removed from the store's pair_history
  // (Store::RetainEvents: per pair its count, first sequence and newest timestamp), replays
  // the events left up to the cursor, and marks everything as already persisted. The result
  // is the state a replay of every event 1..cursor gives: the same training and held-out
  // pairs in the same order (by first event), the same newest times and watermark.
  // *cursor receives the cursor. Corruption if the log, pair_history and the dictionaries
  // disagree. With window_ms > 0 the loaded state is compacted to the window at the end, and
  // pairs of pair_history that would leave then are never loaded (memory for the window's
  // pairs only).
  static Status Load(const store::Store& store, double holdout_fraction, TrainingState* out,
                     uint64_t* cursor, int64_t window_ms = 0);

  // Folds one event in: interns its ids, and adds the pair to the training interactions or
  // the validation set. When the pair is a new training pair, its index in train().pairs()
  // is appended to *new_pairs (if not null).
  Status Apply(const store::Event& event, std::vector<uint64_t>* new_pairs);

  // Adds everything not yet persisted (new ids, new training pairs, the degrees of items
  // those pairs touched) to *change. Other fields of *change are left alone. Call
  // MarkPersisted() once the change is committed; until then the same changes are collected
  // again by the next call (a failed commit loses nothing).
  void CollectChanges(store::StateChange* change) const;
  void MarkPersisted();

  // The training window in ms (0: none). Set before the first Apply.
  void set_window_ms(int64_t window_ms) { window_ms_ = window_ms; }
  int64_t window_ms() const { return window_ms_; }
  // The newest event timestamp folded in (0 before any).
  int64_t watermark_ms() const { return watermark_ms_; }
  // Drops the pairs whose latest event is older than watermark - window (none without a
  // window). Pair indexes of the survivors change (their order is kept); user and item
  // indexes do not. *removed (may be null) receives how many training pairs left.
  // Errors: those of Interactions::Build (cannot happen for a consistent state).
  Status Compact(uint64_t* removed);

  const trainer::Interactions& train() const { return train_; }
  const std::vector<trainer::Pair>& validation() const { return validation_; }
  // With a window: the newest event time of a pair in the state (0 when unknown).
  int64_t last_event_ms(uint32_t user, uint32_t item) const {
    auto it = last_ms_.find((static_cast<uint64_t>(user) << 32) | item);
    return it == last_ms_.end() ? 0 : it->second;
  }
  const IdDictionary& users() const { return users_; }
  const IdDictionary& items() const { return items_; }
  double holdout_fraction() const { return holdout_fraction_; }

 private:
  // Load's first part after retention: the pairs of pair_history (events up to
  // log.folded_through), in first-event order.
  Status LoadHistory(const store::Store& store, const store::LogStats& log, uint64_t cursor);

  double holdout_fraction_;
  int64_t window_ms_ = 0;
  int64_t watermark_ms_ = 0;
  // With a window: the latest event time of every training and held-out pair (key user << 32 |
  // item). Memory: about 40 bytes a pair in the window.
  std::unordered_map<uint64_t, int64_t> last_ms_;
  IdDictionary users_;
  IdDictionary items_;
  trainer::Interactions train_;
  std::vector<trainer::Pair> validation_;
  std::unordered_set<uint64_t> validation_keys_;  // (user << 32 | item), for de-duplication
  // Persisted watermarks: everything below them is already in the store.
  uint32_t persisted_users_ = 0;
  uint32_t persisted_items_ = 0;
  uint64_t persisted_pairs_ = 0;
};

}  // namespace plumb::online
