// Event-log retention: Store::RetainEvents, GetLogStats, ForEachPairHistory (store.h has the
// contracts).
//
// A pass reads the oldest events (never beyond the consumer cursor), folds each into the
// pair_history record of its (user, item) pair and removes it, one atomic write per chunk of
// events: the fold, a range deletion of the chunk's keys and the new retention totals. So a
// crash at any point leaves every event either in the log or in pair_history, never both and
// never neither, and TrainingState::Load rebuilds the same state from the two.
//
// Concurrency: events up to the cursor never change again and only a pass writes
// pair_history and the retention totals (under retention_mu), so a pass reads without a
// snapshot and writes without the store's write lock: appends and commits go on beside it and
// wait at most for one chunk's write inside RocksDB.
#include <rocksdb/convenience.h>
#include <rocksdb/db.h>
#include <rocksdb/options.h>
#include <rocksdb/write_batch.h>

#include <algorithm>
#include <chrono>
#include <limits>
#include <unordered_map>
#include <vector>

#include "store/keys.h"
#include "store/records.h"
#include "store/store_impl.h"

namespace plumb::store {

using namespace internal;

namespace {

// One event of a chunk, reduced to what the fold needs.
struct Removal {
  uint64_t seq = 0;
  std::string user_id;
  std::string item_id;
  int64_t timestamp_ms = 0;
};

uint64_t PairKey(uint32_t user, uint32_t item) {
  return (static_cast<uint64_t>(user) << 32) | item;
}

}  // namespace

Status Store::Impl::ReadRetentionTotals(const rocksdb::ReadOptions& ro, LogStats* totals) const {
  totals->removed_events = totals->removed_bytes = totals->folded_through = 0;
  totals->history_pairs = totals->retention_passes = 0;
  totals->folded_watermark_ms = totals->last_retention_ms = 0;
  std::string value;
  Status s = Get(ro, meta, keys::kMetaRetention, &value, "meta: retention totals");
  if (s.IsNotFound()) return Status::Ok();
  PLUMB_RETURN_IF_ERROR(s);
  if (!records::DecodeRetention(value, totals)) {
    return Status::Corruption("meta: the retention totals do not parse");
  }
  return Status::Ok();
}

Status Store::RetainEvents(const RetentionPolicy& policy, RetentionReport* report) {
  *report = RetentionReport();
  PLUMB_RETURN_IF_ERROR(impl_->RequirePrimary("RetainEvents"));
  if (policy.max_age_ms < 0) return Status::InvalidArgument("max_age_ms must not be negative");
  if (policy.events_per_write == 0) {
    return Status::InvalidArgument("events_per_write must be at least 1");
  }
  Impl& d = *impl_;
  std::lock_guard retention_lock(d.retention_mu);
  const auto started = std::chrono::steady_clock::now();
  auto finish = [&](std::string why) {
    report->stopped_by = std::move(why);
    report->seconds =
        std::chrono::duration<double>(std::chrono::steady_clock::now() - started).count();
    return Status::Ok();
  };
  if (policy.max_age_ms == 0 && policy.max_log_bytes == 0) return finish("no rule");

  const rocksdb::ReadOptions ro;
  uint64_t cursor = 0;
  PLUMB_RETURN_IF_ERROR(GetCursor(&cursor));
  LogStats totals;
  PLUMB_RETURN_IF_ERROR(d.ReadRetentionTotals(ro, &totals));

  // The age rule's clock: the newest event timestamp the store has.
  int64_t clock = policy.now_ms;
  if (clock == 0) {
    clock = totals.folded_watermark_ms;
    std::unique_ptr<rocksdb::Iterator> it(d.db->NewIterator(ro, d.events));
    it->SeekToLast();
    if (it->Valid()) {
      Event newest;
      std::string why;
      auto seq = keys::ParseEventKey(AsView(it->key()));
      if (!seq || !records::DecodeEvent(AsView(it->value()), *seq, &newest, &why)) {
        return Status::Corruption("events: the newest event is unreadable");
      }
      clock = std::max(clock, newest.timestamp_ms);
    }
    PLUMB_RETURN_IF_ERROR(FromRocks(it->status(), "events: reading the newest event"));
  }
  const int64_t cut =
      policy.max_age_ms > 0 ? clock - policy.max_age_ms : std::numeric_limits<int64_t>::min();
  report->cut_ms = policy.max_age_ms > 0 ? cut : 0;
  uint64_t live_bytes = d.log_bytes_appended.load() - totals.removed_bytes;
  bool counted_pass = false;
  std::string stopped_by;

  std::vector<Removal> chunk;
  std::unordered_map<std::string, uint32_t> user_index, item_index;
  std::unordered_map<uint64_t, PairHistory> folded;
  std::string value;
  while (stopped_by.empty()) {
    // -- read a chunk of removable events --
    chunk.clear();
    uint64_t chunk_bytes = 0;
    {
      std::unique_ptr<rocksdb::Iterator> it(d.db->NewIterator(ro, d.events));
      std::string why;
      for (it->Seek(AsSlice(keys::EventKey(totals.folded_through + 1)));
           it->Valid() && chunk.size() < policy.events_per_write; it->Next()) {
        auto seq = keys::ParseEventKey(AsView(it->key()));
        if (!seq) return Status::Corruption("events: a key is not an 8-byte sequence");
        if (*seq > cursor) {
          stopped_by = "the trainer's cursor";
          break;
        }
        Event event;
        if (!records::DecodeEvent(AsView(it->value()), *seq, &event, &why)) {
          return Status::Corruption("event " + std::to_string(*seq) + ": " + why);
        }
        const uint64_t bytes = StoredEventBytes(it->value().size());
        const bool over_budget = policy.max_log_bytes > 0 && live_bytes > policy.max_log_bytes;
        const bool too_old = policy.max_age_ms > 0 && event.timestamp_ms < cut;
        if (!over_budget && !too_old) {
          stopped_by = "an event within the age and the log within its budget";
          break;
        }
        live_bytes -= std::min(live_bytes, bytes);
        chunk_bytes += bytes;
        chunk.push_back(
            {*seq, std::move(event.user_id), std::move(event.item_id), event.timestamp_ms});
      }
      PLUMB_RETURN_IF_ERROR(FromRocks(it->status(), "events: reading the oldest events"));
      if (stopped_by.empty() && !it->Valid()) {
        stopped_by = chunk.empty() ? "the log is empty" : "the end of the log";
      }
    }
    if (chunk.empty()) break;

    // -- fold it: ids to indexes (the trainer gave every id up to its cursor an index) --
    user_index.clear();
    item_index.clear();
    folded.clear();
    auto index_of = [&](IdSpace space, const std::string& external, uint32_t* index) -> Status {
      auto& cache = space == IdSpace::kUser ? user_index : item_index;
      if (auto found = cache.find(external); found != cache.end()) {
        *index = found->second;
        return Status::Ok();
      }
      Status s = d.Get(ro, d.ids, keys::IdByExternalKey(space, external), &value, "ids");
      if (s.IsNotFound()) {
        return Status::Corruption(std::string(keys::SpaceName(space)) + " id '" + external +
                                  "' of an event up to the cursor has no index");
      }
      PLUMB_RETURN_IF_ERROR(s);
      auto parsed = keys::ParseFixed32(value);
      if (!parsed) return Status::Corruption("ids: '" + external + "' maps to a malformed index");
      cache.emplace(external, *parsed);
      *index = *parsed;
      return Status::Ok();
    };
    int64_t watermark = totals.folded_watermark_ms;
    for (const Removal& e : chunk) {
      uint32_t u = 0, i = 0;
      PLUMB_RETURN_IF_ERROR(index_of(IdSpace::kUser, e.user_id, &u));
      PLUMB_RETURN_IF_ERROR(index_of(IdSpace::kItem, e.item_id, &i));
      auto [it, fresh] = folded.try_emplace(PairKey(u, i));
      PairHistory& h = it->second;
      if (fresh) {
        h.first_seq = e.seq;
        h.last_ms = e.timestamp_ms;
      } else {
        h.last_ms = std::max(h.last_ms, e.timestamp_ms);
      }
      ++h.count;
      watermark = std::max(watermark, e.timestamp_ms);
    }

    rocksdb::WriteBatch batch;
    uint64_t added = 0;
    for (auto& [key, h] : folded) {
      const std::string k =
          keys::InteractionKey(static_cast<uint32_t>(key >> 32), static_cast<uint32_t>(key));
      Status s = d.Get(ro, d.pair_history, k, &value, "pair_history");
      if (s.ok()) {
        PairHistory stored;
        if (!records::DecodePairHistory(value, &stored)) {
          return Status::Corruption("pair_history: the record of user " +
                                    std::to_string(key >> 32) + ", item " +
                                    std::to_string(static_cast<uint32_t>(key)) + " does not parse");
        }
        h.count += stored.count;
        h.first_seq = std::min(h.first_seq, stored.first_seq);
        h.last_ms = std::max(h.last_ms, stored.last_ms);
      } else if (s.IsNotFound()) {
        ++added;
      } else {
        return s;
      }
      batch.Put(d.pair_history, AsSlice(k), AsSlice(records::EncodePairHistory(h)));
    }

    LogStats next = totals;
    next.removed_events += chunk.size();
    next.removed_bytes += chunk_bytes;
    next.folded_through = chunk.back().seq;
    next.folded_watermark_ms = watermark;
    next.history_pairs += added;
    if (!counted_pass) ++next.retention_passes;
    next.last_retention_ms = NowMs();
    batch.DeleteRange(d.events, AsSlice(keys::EventKey(chunk.front().seq)),
                      AsSlice(keys::EventKey(chunk.back().seq + 1)));
    batch.Put(d.meta, AsSlice(keys::kMetaRetention), AsSlice(records::EncodeRetention(next)));
    PLUMB_RETURN_IF_ERROR(d.Write(&batch, "event-log retention"));
    totals = next;
    counted_pass = true;
    report->removed_events += chunk.size();
    report->removed_bytes += chunk_bytes;
    report->pairs_updated += folded.size();
    report->pairs_added += added;
  }

  if (report->removed_events > 0 && policy.reclaim_disk) {
    // Table files wholly inside the removed range go at once; the files that straddle its end
    // are rewritten by a compaction of the range. Best effort: the data is gone either way.
    const std::string end = keys::EventKey(totals.folded_through + 1);
    const rocksdb::Slice end_slice = AsSlice(end);
    // include_end false: `end` is the first event kept, and a file ending with it stays.
    (void)rocksdb::DeleteFilesInRange(d.db, d.events, nullptr, &end_slice, /*include_end=*/false);
    rocksdb::CompactRangeOptions compact;
    compact.exclusive_manual_compaction = false;
    (void)d.db->CompactRange(compact, d.events, nullptr, &end_slice);
  }
  {
    std::unique_ptr<rocksdb::Iterator> it(d.db->NewIterator(ro, d.events));
    it->SeekToFirst();
    if (it->Valid()) {
      if (auto seq = keys::ParseEventKey(AsView(it->key()))) report->first_seq_after = *seq;
    }
  }
  return finish(stopped_by);
}

Status Store::GetLogStats(LogStats* out) const {
  *out = LogStats();
  const Impl& d = *impl_;
  Impl::ReadView view(d);
  PLUMB_RETURN_IF_ERROR(d.ReadRetentionTotals(view.options(), out));
  out->last_seq = d.last_seq.load();
  {
    std::unique_ptr<rocksdb::Iterator> it(d.db->NewIterator(view.options(), d.events));
    it->SeekToFirst();
    if (it->Valid()) {
      auto seq = keys::ParseEventKey(AsView(it->key()));
      if (!seq) return Status::Corruption("events: a key is not an 8-byte sequence");
      Event oldest;
      std::string why;
      if (!records::DecodeEvent(AsView(it->value()), *seq, &oldest, &why)) {
        return Status::Corruption("event " + std::to_string(*seq) + ": " + why);
      }
      out->first_seq = *seq;
      out->oldest_timestamp_ms = oldest.timestamp_ms;
      out->oldest_received_ms = oldest.received_ms;
      out->events = out->last_seq >= *seq ? out->last_seq - *seq + 1 : 0;
    }
    PLUMB_RETURN_IF_ERROR(FromRocks(it->status(), "events: reading the oldest event"));
  }
  if (d.log_bytes_known.load()) {
    const uint64_t appended = d.log_bytes_appended.load();
    out->bytes = appended >= out->removed_bytes ? appended - out->removed_bytes : 0;
  } else {
    PLUMB_RETURN_IF_ERROR(d.CountLogBytes(view.options(), &out->bytes));
  }
  uint64_t disk = 0;
  if (d.db->GetIntProperty(d.events, "rocksdb.total-sst-files-size", &disk)) out->disk_bytes = disk;
  return Status::Ok();
}

Status Store::ForEachPairHistory(
    const std::function<void(uint32_t, uint32_t, const PairHistory&)>& fn) const {
  const Impl& d = *impl_;
  if (d.pair_history == nullptr) return Status::Ok();
  Impl::ReadView view(d);
  std::unique_ptr<rocksdb::Iterator> it(d.db->NewIterator(view.options(), d.pair_history));
  PairHistory record;
  for (it->SeekToFirst(); it->Valid(); it->Next()) {
    if (it->key().size() != 8) return Status::Corruption("pair_history: a key is not 8 bytes");
    const uint32_t user = keys::ReadBigEndian32(it->key().data());
    const uint32_t item = keys::ReadBigEndian32(it->key().data() + 4);
    if (!records::DecodePairHistory(AsView(it->value()), &record)) {
      return Status::Corruption("pair_history: the record of user " + std::to_string(user) +
                                ", item " + std::to_string(item) + " does not parse");
    }
    fn(user, item, record);
  }
  return FromRocks(it->status(), "reading pair_history");
}

}  // namespace plumb::store
