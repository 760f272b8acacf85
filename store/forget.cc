// Store::ForgetUser: erasure of one user's personal data on request.
#include <rocksdb/options.h>

#include <algorithm>
#include <filesystem>
#include <map>

#include "store/keys.h"
#include "store/records.h"
#include "store/store_impl.h"

namespace plumb::store {

using namespace internal;

namespace {

std::string ForgottenUserId(uint32_t index) {
  return std::string(kForgottenIdPrefix) + std::to_string(index);
}

}  // namespace

Status Store::ForgetUser(std::string_view user_id, ForgetReport* report) {
  *report = ForgetReport();
  ForgetReport& r = *report;
  PLUMB_RETURN_IF_ERROR(impl_->RequirePrimary("ForgetUser"));
  if (user_id.empty()) return Status::InvalidArgument("the user id to forget is empty");
  if (user_id.starts_with(kForgottenIdPrefix)) {
    return Status::InvalidArgument("'" + std::string(user_id) + "' is already forgotten");
  }
  std::lock_guard write_lock(impl_->write_mu);
  Impl& d = *impl_;
  const rocksdb::ReadOptions ro;  // the only writer: plain reads see the latest state
  rocksdb::WriteBatch batch;

  // 1. Events, wherever they are in the log (also those not trained on yet), and their
  //    de-duplication records.
  {
    std::unique_ptr<rocksdb::Iterator> it(d.db->NewIterator(ro, d.events));
    std::string why, record;
    for (it->SeekToFirst(); it->Valid(); it->Next()) {
      auto seq = keys::ParseEventKey(AsView(it->key()));
      Event event;
      if (!seq || !records::DecodeEvent(AsView(it->value()), *seq, &event, &why)) {
        return Status::Corruption("event log: cannot read " +
                                  (seq ? "event " + std::to_string(*seq) : std::string("a key")) +
                                  " (" + why + "); run plumb repair first, nothing was erased");
      }
      if (event.user_id != user_id) continue;
      batch.Delete(d.events, it->key());
      ++r.events;
      if (!event.event_id.empty()) {
        Status s = d.Get(ro, d.event_ids, event.event_id, &record, "event_ids");
        uint64_t first = 0;
        int64_t received = 0;
        if (s.ok() && keys::ParseEventIdRecord(record, &first, &received) && first == *seq) {
          batch.Delete(d.event_ids, AsSlice(event.event_id));
        } else if (!s.ok() && !s.IsNotFound()) {
          return s;
        }
      }
    }
    PLUMB_RETURN_IF_ERROR(FromRocks(it->status(), "reading the event log"));
  }

  // 2. The dictionary entry, the interaction set and what it added to the live degrees.
  std::string raw;
  Status found = d.Get(ro, d.ids, keys::IdByExternalKey(IdSpace::kUser, user_id), &raw, "ids");
  if (!found.ok() && !found.IsNotFound()) return found;
  if (found.ok()) {
    auto index = keys::ParseFixed32(raw);
    if (!index) return Status::Corruption("ids: the user's entry is malformed");
    r.had_index = true;
    r.index = *index;
    batch.Delete(d.ids, AsSlice(keys::IdByExternalKey(IdSpace::kUser, user_id)));
    // The index stays taken (every version's rows are numbered by it); its name goes.
    batch.Put(d.ids, AsSlice(keys::ExternalByIdKey(IdSpace::kUser, *index)),
              AsSlice(ForgottenUserId(*index)));

    const std::string prefix = keys::InteractionPrefix(*index);
    std::unique_ptr<rocksdb::Iterator> it(d.db->NewIterator(ro, d.interactions));
    std::map<uint32_t, uint32_t> lost;  // item -> interactions removed (0 or 1 each)
    for (it->Seek(AsSlice(prefix)); it->Valid() && StartsWith(it->key(), prefix); it->Next()) {
      if (it->key().size() != 8) return Status::Corruption("interactions: a key is not 8 bytes");
      ++lost[keys::ReadBigEndian32(it->key().data() + 4)];
      batch.Delete(d.interactions, it->key());
      ++r.interactions;
    }
    PLUMB_RETURN_IF_ERROR(FromRocks(it->status(), "reading the user's interactions"));
    for (const auto& [item, n] : lost) {
      std::string value;
      Status s = d.Get(ro, d.degrees, keys::DegreeKey(item), &value, "degrees");
      if (s.IsNotFound()) continue;
      PLUMB_RETURN_IF_ERROR(s);
      auto degree = keys::ParseFixed32(value);
      if (!degree) return Status::Corruption("degrees: item " + std::to_string(item));
      batch.Put(d.degrees, AsSlice(keys::DegreeKey(item)),
                AsSlice(keys::Fixed32(*degree > n ? *degree - n : 0)));
    }

    // 3. The user's row in every kept version: zeros, so that no version still carries
    //    what was learnt from the user's history.
    std::vector<uint64_t> versions;
    PLUMB_RETURN_IF_ERROR(d.ListVersionNumbers(ro, &versions));
    for (uint64_t v : versions) {
      VersionManifest m;
      uint32_t rpb = 0;
      PLUMB_RETURN_IF_ERROR(d.ReadManifestLocked(ro, v, &m, &rpb));
      if (*index >= m.num_users) continue;
      const uint32_t block = *index / rpb;
      const std::string key = keys::BlockKey(v, MatrixKind::kUsers, block);
      std::string rows;
      PLUMB_RETURN_IF_ERROR(d.Get(ro, d.models, key, &rows, VersionWhat(v, "users block")));
      const size_t row_bytes = size_t{m.dim} * sizeof(float);
      const size_t at = size_t{*index % rpb} * row_bytes;
      if (at + row_bytes > rows.size()) {
        return Status::Corruption(VersionWhat(v, "users block ") + std::to_string(block) +
                                  " is too short");
      }
      std::fill(rows.begin() + static_cast<std::ptrdiff_t>(at),
                rows.begin() + static_cast<std::ptrdiff_t>(at + row_bytes), '\0');
      batch.Put(d.models, AsSlice(key), AsSlice(rows));
      r.versions_changed.push_back(v);
    }
  }

  if (batch.Count() > 0) PLUMB_RETURN_IF_ERROR(d.Write(&batch, "erasing the user"));

  // 4. Deleted records live on in table files and the write-ahead log until RocksDB
  //    rewrites them: flush and compact everything now, so that the bytes are gone from
  //    disk when this returns (old files are deleted once no reader holds them).
  rocksdb::FlushOptions flush;
  flush.wait = true;
  PLUMB_RETURN_IF_ERROR(FromRocks(d.db->Flush(flush, d.handles), "flushing after the erasure"));
  rocksdb::CompactRangeOptions compact;
  compact.bottommost_level_compaction = rocksdb::BottommostLevelCompaction::kForce;
  for (rocksdb::ColumnFamilyHandle* cf : d.handles) {
    PLUMB_RETURN_IF_ERROR(FromRocks(d.db->CompactRange(compact, cf, nullptr, nullptr),
                                    "compacting after the erasure"));
  }
  std::error_code ec;
  for (const auto& e : std::filesystem::directory_iterator(d.dir + "/lost", ec)) {
    r.lost_files.push_back(e.path().string());
  }
  return Status::Ok();
}

}  // namespace plumb::store
