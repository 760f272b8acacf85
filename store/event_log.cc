// Store's event log: appending with de-duplication, reading in order, the consumer cursor.
#include <algorithm>
#include <unordered_map>

#include "store/keys.h"
#include "store/records.h"
#include "store/store_impl.h"

namespace plumb::store {

using namespace internal;

Status Store::AppendEvents(std::span<const EventInput> events, AppendResult* result) {
  *result = AppendResult();
  PLUMB_RETURN_IF_ERROR(impl_->RequirePrimary("AppendEvents"));
  for (size_t i = 0; i < events.size(); ++i) {
    if (events[i].user_id.empty() || events[i].item_id.empty()) {
      return Status::InvalidArgument("event " + std::to_string(i) +
                                     " of the batch has an empty user or item id");
    }
  }

  std::lock_guard write_lock(impl_->write_mu);
  const int64_t now_ms = std::max<int64_t>(NowMs(), 1);
  const int64_t window = impl_->options.dedup_window_ms;
  uint64_t seq = impl_->last_seq.load();
  rocksdb::WriteBatch batch;
  std::unordered_map<std::string_view, uint64_t> in_batch;
  AppendResult r;
  r.seqs.reserve(events.size());
  r.duplicate.reserve(events.size());
  std::string value;
  uint64_t log_bytes = impl_->log_bytes_appended.load();

  for (size_t i = 0; i < events.size(); ++i) {
    const EventInput& e = events[i];
    if (!e.event_id.empty()) {
      auto found = in_batch.find(e.event_id);
      uint64_t earlier = 0;
      bool dup = false;
      if (found != in_batch.end()) {
        earlier = found->second;
        dup = true;
      } else {
        // Only this thread writes, so reading the latest state needs no snapshot.
        Status s =
            impl_->Get(rocksdb::ReadOptions(), impl_->event_ids, e.event_id, &value, "event_ids");
        if (s.ok()) {
          int64_t received = 0;
          if (!keys::ParseEventIdRecord(value, &earlier, &received)) {
            return Status::Corruption("event_ids: unreadable record for event id '" + e.event_id +
                                      "'");
          }
          dup = keys::WithinDedupWindow(received, now_ms, window);
        } else if (!s.IsNotFound()) {
          return s;
        }
      }
      if (dup) {
        r.seqs.push_back(earlier);
        r.duplicate.push_back(true);
        ++r.duplicates;
        continue;
      }
    }
    ++seq;
    const std::string encoded = records::EncodeEvent(e, now_ms);
    log_bytes += StoredEventBytes(encoded.size());
    batch.Put(impl_->events, AsSlice(keys::EventKey(seq)), AsSlice(encoded));
    if (!e.event_id.empty()) {
      batch.Put(impl_->event_ids, AsSlice(e.event_id), AsSlice(keys::EventIdRecord(seq, now_ms)));
      in_batch[e.event_id] = seq;
    }
    r.seqs.push_back(seq);
    r.duplicate.push_back(false);
    ++r.appended;
  }

  if (r.appended > 0) {
    batch.Put(impl_->meta, AsSlice(keys::kMetaLastSequence), AsSlice(keys::Fixed64(seq)));
    batch.Put(impl_->meta, AsSlice(keys::kMetaLogBytes), AsSlice(keys::Fixed64(log_bytes)));
    PLUMB_RETURN_IF_ERROR(impl_->Write(&batch, "appending events"));
    impl_->last_seq.store(seq);
    impl_->log_bytes_appended.store(log_bytes);
  }
  r.last_seq = seq;
  *result = std::move(r);
  return Status::Ok();
}

Status Store::ReadEvents(uint64_t after_seq, size_t max_events, std::vector<Event>* out) const {
  out->clear();
  if (max_events == 0 || after_seq == UINT64_MAX) return Status::Ok();
  Impl::ReadView view(*impl_);
  std::unique_ptr<rocksdb::Iterator> it(impl_->db->NewIterator(view.options(), impl_->events));
  std::string why;
  for (it->Seek(AsSlice(keys::EventKey(after_seq + 1))); it->Valid() && out->size() < max_events;
       it->Next()) {
    auto seq = keys::ParseEventKey(AsView(it->key()));
    if (!seq) return Status::Corruption("events: a key is not an 8-byte sequence");
    Event event;
    if (!records::DecodeEvent(AsView(it->value()), *seq, &event, &why)) {
      return Status::Corruption("event " + std::to_string(*seq) + ": " + why);
    }
    out->push_back(std::move(event));
  }
  return FromRocks(it->status(), "reading events");
}

uint64_t Store::LastSequence() const { return impl_->last_seq.load(); }

Status Store::GetCursor(uint64_t* seq) const {
  Impl::ReadView view(*impl_);
  std::optional<uint64_t> stored;
  Status s = impl_->Meta(view.options()).GetU64(keys::kMetaCursor, &stored);
  *seq = stored.value_or(0);
  return s;
}

Status Store::Impl::CountLogBytes(const rocksdb::ReadOptions& ro, uint64_t* bytes) const {
  *bytes = 0;
  std::unique_ptr<rocksdb::Iterator> it(db->NewIterator(ro, events));
  for (it->SeekToFirst(); it->Valid(); it->Next()) *bytes += StoredEventBytes(it->value().size());
  return FromRocks(it->status(), "events: counting the log's size");
}

}  // namespace plumb::store
