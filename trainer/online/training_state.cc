#include "trainer/online/training_state.h"

#include <algorithm>

namespace plumb::online {

uint32_t IdDictionary::Intern(std::string_view external, bool* created) {
  auto [it, inserted] = index_.try_emplace(std::string(external), size());
  if (inserted) names_.push_back(it->first);
  if (created) *created = inserted;
  return it->second;
}

bool IdDictionary::Find(std::string_view external, uint32_t* index) const {
  auto it = index_.find(std::string(external));
  if (it == index_.end()) return false;
  *index = it->second;
  return true;
}

bool IsHeldOut(std::string_view user, std::string_view item, double holdout_fraction) {
  if (holdout_fraction <= 0.0) return false;
  if (holdout_fraction >= 1.0) return true;
  // 64-bit FNV-1a (Fowler–Noll–Vo): fixed constants, so the split never depends on the
  // standard library's std::hash.
  uint64_t h = 14695981039346656037ULL;
  auto mix = [&h](std::string_view s) {
    for (unsigned char c : s) {
      h ^= c;
      h *= 1099511628211ULL;
    }
  };
  mix(user);
  mix(std::string_view("\0", 1));
  mix(item);
  // Top 53 bits as a uniform double in [0, 1).
  double u = static_cast<double>(h >> 11) * (1.0 / 9007199254740992.0);
  return u < holdout_fraction;
}

Status TrainingState::Load(const store::Store& store, double holdout_fraction, TrainingState* out,
                           uint64_t* cursor, int64_t window_ms) {
  TrainingState state(holdout_fraction);
  state.set_window_ms(window_ms);
  PLUMB_RETURN_IF_ERROR(store.GetCursor(cursor));
  for (auto space : {store::IdSpace::kUser, store::IdSpace::kItem}) {
    std::vector<std::string> names;
    PLUMB_RETURN_IF_ERROR(store.LoadIds(space, store.IdCount(space), &names));
    IdDictionary& dict = space == store::IdSpace::kUser ? state.users_ : state.items_;
    for (const std::string& n : names) {
      bool created = false;
      dict.Intern(n, &created);
      if (!created) return Status::Corruption("id dictionary holds '" + n + "' twice");
    }
  }
  const uint32_t stored_users = state.users_.size();
  const uint32_t stored_items = state.items_.size();
  PLUMB_RETURN_IF_ERROR(state.train_.EnsureShape(stored_users, stored_items));

  store::LogStats log;
  PLUMB_RETURN_IF_ERROR(store.GetLogStats(&log));
  if (log.folded_through > *cursor) {
    return Status::Corruption("retention removed events up to " +
                              std::to_string(log.folded_through) + ", beyond the cursor " +
                              std::to_string(*cursor));
  }
  // Events up to folded_through are in pair_history; the log holds the rest.
  if (log.folded_through > 0) PLUMB_RETURN_IF_ERROR(state.LoadHistory(store, log, *cursor));

  std::vector<store::Event> batch;
  uint64_t after = log.folded_through;
  while (after < *cursor) {
    PLUMB_RETURN_IF_ERROR(store.ReadEvents(after, 8192, &batch));
    if (batch.empty()) break;
    for (const store::Event& ev : batch) {
      if (ev.seq > *cursor) break;
      PLUMB_RETURN_IF_ERROR(state.Apply(ev, nullptr));
      after = ev.seq;
    }
    if (batch.back().seq > *cursor) break;
  }
  // Events may be missing below the cursor (a user's erased by ForgetUser, or lost and set
  // aside by a repair); a cursor beyond the log's recorded end is damage.
  if (*cursor > store.LastSequence()) {
    return Status::Corruption("event log ends at " + std::to_string(store.LastSequence()) +
                              " but the cursor is " + std::to_string(*cursor));
  }
  if (state.users_.size() != stored_users || state.items_.size() != stored_items) {
    return Status::Corruption(
        "replaying the log up to the cursor created ids the stored "
        "dictionary does not have");
  }
  state.persisted_users_ = state.users_.size();
  state.persisted_items_ = state.items_.size();
  state.persisted_pairs_ = state.train_.size();
  PLUMB_RETURN_IF_ERROR(state.Compact(nullptr));
  *out = std::move(state);
  return Status::Ok();
}

Status TrainingState::LoadHistory(const store::Store& store, const store::LogStats& log,
                                  uint64_t cursor) {
  auto key_of = [](uint32_t u, uint32_t i) { return (static_cast<uint64_t>(u) << 32) | i; };
  // With a window, leave out the pairs the final Compact would drop anyway, so that loading
  // needs memory for the pairs in the window, not for every pair ever seen. That takes the
  // final watermark and the pairs the remaining events touch (a touched pair is kept: its
  // newer events may bring it back into the window), from one pass over the log.
  std::unordered_set<uint64_t> touched;
  int64_t watermark = log.folded_watermark_ms;
  if (window_ms_ > 0) {
    std::vector<store::Event> batch;
    uint64_t after = log.folded_through;
    while (after < cursor) {
      PLUMB_RETURN_IF_ERROR(store.ReadEvents(after, 8192, &batch));
      if (batch.empty()) break;
      for (const store::Event& ev : batch) {
        if (ev.seq > cursor) break;
        after = ev.seq;
        watermark = std::max(watermark, ev.timestamp_ms);
        uint32_t u = 0, i = 0;
        if (users_.Find(ev.user_id, &u) && items_.Find(ev.item_id, &i))
          touched.insert(key_of(u, i));
      }
      if (batch.back().seq > cursor) break;
    }
  }
  const int64_t cutoff = watermark - window_ms_;

  struct Entry {
    uint64_t first_seq;
    uint32_t user, item;
    int64_t last_ms;
  };
  std::vector<Entry> entries;
  bool bad_index = false;
  PLUMB_RETURN_IF_ERROR(
      store.ForEachPairHistory([&](uint32_t u, uint32_t i, const store::PairHistory& h) {
        if (u >= users_.size() || i >= items_.size()) {
          bad_index = true;
          return;
        }
        if (window_ms_ > 0 && h.last_ms < cutoff && !touched.contains(key_of(u, i))) return;
        entries.push_back({h.first_seq, u, i, h.last_ms});
      }));
  if (bad_index) {
    return Status::Corruption("pair_history names a user or item the dictionary does not have");
  }
  std::unordered_set<uint64_t>().swap(touched);
  // The order a replay of the removed events would have given: by each pair's first event.
  std::sort(entries.begin(), entries.end(),
            [](const Entry& a, const Entry& b) { return a.first_seq < b.first_seq; });
  for (const Entry& e : entries) {
    const uint64_t key = key_of(e.user, e.item);
    if (window_ms_ > 0) last_ms_[key] = e.last_ms;
    if (IsHeldOut(users_.name(e.user), items_.name(e.item), holdout_fraction_)) {
      if (validation_keys_.insert(key).second) validation_.push_back({e.user, e.item});
    } else {
      PLUMB_RETURN_IF_ERROR(train_.Add(e.user, e.item));
    }
  }
  watermark_ms_ = std::max(watermark_ms_, log.folded_watermark_ms);
  return Status::Ok();
}

Status TrainingState::Apply(const store::Event& event, std::vector<uint64_t>* new_pairs) {
  const uint32_t u = users_.Intern(event.user_id, nullptr);
  const uint32_t i = items_.Intern(event.item_id, nullptr);
  PLUMB_RETURN_IF_ERROR(train_.EnsureShape(users_.size(), items_.size()));
  watermark_ms_ = std::max(watermark_ms_, event.timestamp_ms);
  if (window_ms_ > 0) {
    int64_t& last = last_ms_[(static_cast<uint64_t>(u) << 32) | i];
    last = std::max(last, event.timestamp_ms);
  }
  if (IsHeldOut(event.user_id, event.item_id, holdout_fraction_)) {
    const uint64_t key = (static_cast<uint64_t>(u) << 32) | i;
    if (validation_keys_.insert(key).second) validation_.push_back({u, i});
    return Status::Ok();
  }
  bool added = false;
  PLUMB_RETURN_IF_ERROR(train_.Add(u, i, &added));
  if (added && new_pairs) new_pairs->push_back(train_.size() - 1);
  return Status::Ok();
}

void TrainingState::CollectChanges(store::StateChange* change) const {
  for (uint32_t u = persisted_users_; u < users_.size(); ++u) {
    change->new_users.emplace_back(u, users_.name(u));
  }
  for (uint32_t i = persisted_items_; i < items_.size(); ++i) {
    change->new_items.emplace_back(i, items_.name(i));
  }
  std::vector<uint32_t> touched;
  for (uint64_t p = persisted_pairs_; p < train_.size(); ++p) {
    const trainer::Pair& pair = train_.pair(p);
    change->new_interactions.emplace_back(pair.user, pair.item);
    touched.push_back(pair.item);
  }
  std::sort(touched.begin(), touched.end());
  touched.erase(std::unique(touched.begin(), touched.end()), touched.end());
  for (uint32_t item : touched) change->item_degrees.emplace_back(item, train_.item_degree(item));
}

Status TrainingState::Compact(uint64_t* removed) {
  if (removed != nullptr) *removed = 0;
  if (window_ms_ <= 0) return Status::Ok();
  const int64_t cutoff = watermark_ms_ - window_ms_;
  auto in_window = [&](uint32_t u, uint32_t i) {
    auto it = last_ms_.find((static_cast<uint64_t>(u) << 32) | i);
    return it != last_ms_.end() && it->second >= cutoff;
  };
  std::vector<trainer::Pair> kept;
  kept.reserve(train_.size());
  uint64_t persisted_kept = 0;
  for (uint64_t p = 0; p < train_.size(); ++p) {
    const trainer::Pair& pair = train_.pair(p);
    if (!in_window(pair.user, pair.item)) continue;
    kept.push_back(pair);
    if (p < persisted_pairs_) ++persisted_kept;
  }
  const uint64_t gone = train_.size() - kept.size();
  std::vector<trainer::Pair> held;
  for (const trainer::Pair& pair : validation_) {
    if (in_window(pair.user, pair.item)) held.push_back(pair);
  }
  if (gone == 0 && held.size() == validation_.size()) return Status::Ok();
  trainer::Interactions next;
  PLUMB_RETURN_IF_ERROR(
      trainer::Interactions::Build(kept, train_.num_users(), train_.num_items(), &next));
  train_ = std::move(next);
  persisted_pairs_ = persisted_kept;
  validation_ = std::move(held);
  validation_keys_.clear();
  for (const trainer::Pair& pair : validation_) {
    validation_keys_.insert((static_cast<uint64_t>(pair.user) << 32) | pair.item);
  }
  for (auto it = last_ms_.begin(); it != last_ms_.end();) {
    it = it->second < cutoff ? last_ms_.erase(it) : std::next(it);
  }
  if (removed != nullptr) *removed = gone;
  return Status::Ok();
}

void TrainingState::MarkPersisted() {
  persisted_users_ = users_.size();
  persisted_items_ = items_.size();
  persisted_pairs_ = train_.size();
}

}  // namespace plumb::online
