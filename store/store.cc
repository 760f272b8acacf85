#include "store/store.h"

#include <rocksdb/db.h>
#include <rocksdb/filter_policy.h>
#include <rocksdb/options.h>
#include <rocksdb/slice.h>
#include <rocksdb/snapshot.h>
#include <rocksdb/table.h>
#include <rocksdb/write_batch.h>
#include <sys/statvfs.h>

#include <algorithm>
#include <atomic>
#include <chrono>
#include <cmath>
#include <cstring>
#include <filesystem>
#include <mutex>
#include <set>
#include <shared_mutex>
#include <unordered_map>
#include <unordered_set>

#include "store/event_id_expiry.h"
#include "store/keys.h"
#include "store/records.h"
#include "store/store_impl.h"

namespace plumb::store {

using namespace internal;

Status Store::Impl::LoadCounters(const rocksdb::ReadOptions& ro) {
  // Highest event sequence: the last key of the events family, or the recorded value if
  // higher (it is written with every append).
  uint64_t last = 0;
  {
    std::unique_ptr<rocksdb::Iterator> it(db->NewIterator(ro, events));
    it->SeekToLast();
    if (it->Valid()) {
      auto seq = keys::ParseEventKey(AsView(it->key()));
      if (!seq) return Status::Corruption("events: last key is not an 8-byte sequence");
      last = *seq;
    }
    PLUMB_RETURN_IF_ERROR(FromRocks(it->status(), "events: reading the last sequence"));
  }
  std::string value;
  Status s = Get(ro, meta, keys::kMetaLastSequence, &value, "meta: last sequence");
  if (s.ok()) {
    auto recorded = keys::ParseFixed64(value);
    if (!recorded) return Status::Corruption("meta: last sequence is not an 8-byte value");
    last = std::max(last, *recorded);
  } else if (!s.IsNotFound()) {
    return s;
  }
  last_seq.store(last);

  s = Get(ro, meta, keys::kMetaLogBytes, &value, "meta: log bytes");
  if (s.ok()) {
    auto recorded = keys::ParseFixed64(value);
    if (!recorded) return Status::Corruption("meta: log bytes is not an 8-byte value");
    log_bytes_appended.store(*recorded);
    log_bytes_known.store(true);
  } else if (s.IsNotFound()) {
    // A store written before the size was recorded (or an empty one): the primary counts it
    // once when it opens (OpenPrimary); a follower counts on demand (GetLogStats).
    log_bytes_appended.store(0);
    log_bytes_known.store(last == 0);
  } else {
    return s;
  }

  // Dictionary sizes: Commit() keeps indexes gap-free, so the count is the last index + 1.
  for (IdSpace space : {IdSpace::kUser, IdSpace::kItem}) {
    const std::string prefix = keys::ExternalByIdPrefix(space);
    std::unique_ptr<rocksdb::Iterator> it(db->NewIterator(ro, ids));
    it->SeekForPrev(AsSlice(keys::ExternalByIdKey(space, UINT32_MAX)));
    uint32_t count = 0;
    if (it->Valid() && StartsWith(it->key(), prefix)) {
      if (it->key().size() != prefix.size() + 4) {
        return Status::Corruption("ids: malformed " + std::string(keys::SpaceName(space)) +
                                  " index key");
      }
      const uint32_t last_index = keys::ReadBigEndian32(it->key().data() + prefix.size());
      if (last_index == UINT32_MAX) {
        return Status::Corruption("ids: " + std::string(keys::SpaceName(space)) +
                                  " dictionary is full");
      }
      count = last_index + 1;
    }
    PLUMB_RETURN_IF_ERROR(FromRocks(it->status(), "ids: reading the dictionary size"));
    Count(space).store(count);
  }

  if (primary) {
    uint64_t next = 1;
    s = Get(ro, meta, keys::kMetaNextVersion, &value, "meta: next version");
    if (s.ok()) {
      auto recorded = keys::ParseFixed64(value);
      if (!recorded) return Status::Corruption("meta: next version is not an 8-byte value");
      next = std::max(next, *recorded);
    } else if (!s.IsNotFound()) {
      return s;
    }
    std::vector<uint64_t> versions;
    PLUMB_RETURN_IF_ERROR(ListVersionNumbers(ro, &versions));
    if (!versions.empty()) next = std::max(next, versions.back() + 1);
    next_version = next;
  }
  return Status::Ok();
}

void Store::Impl::AssignHandles(const std::vector<bool>& present) {
  static_assert(kNumFamilies == 8);
  rocksdb::ColumnFamilyHandle** slots[kNumFamilies] = {&events,  &event_ids, &ids,  &interactions,
                                                      &degrees, &models,    &meta, &pair_history};
  size_t next = 1;  // handles[0] is RocksDB's default family
  for (size_t k = 0; k < kNumFamilies; ++k) {
    *slots[k] = present[k] ? handles[next++] : nullptr;
  }
}

Status Store::Impl::CountLogBytes(const rocksdb::ReadOptions& ro, uint64_t* bytes) const {
  *bytes = 0;
  std::unique_ptr<rocksdb::Iterator> it(db->NewIterator(ro, events));
  for (it->SeekToFirst(); it->Valid(); it->Next()) *bytes += StoredEventBytes(it->value().size());
  return FromRocks(it->status(), "events: counting the log's size");
}

Status Store::Impl::ListVersionNumbers(const rocksdb::ReadOptions& ro,
                                       std::vector<uint64_t>* out) const {
  out->clear();
  const std::string prefix = keys::ManifestPrefix();
  std::unique_ptr<rocksdb::Iterator> it(db->NewIterator(ro, models));
  for (it->Seek(AsSlice(prefix)); it->Valid() && StartsWith(it->key(), prefix); it->Next()) {
    auto version = keys::ParseManifestKey(AsView(it->key()));
    if (!version) return Status::Corruption("models: malformed manifest key");
    out->push_back(*version);
  }
  return FromRocks(it->status(), "models: listing versions");
}

Status Store::Impl::ActiveVersion(const rocksdb::ReadOptions& ro, uint64_t* version) const {
  *version = 0;
  std::string value;
  Status s = Get(ro, meta, keys::kMetaActiveVersion, &value, "meta: active version");
  if (s.IsNotFound()) return Status::Ok();
  PLUMB_RETURN_IF_ERROR(s);
  auto parsed = keys::ParseFixed64(value);
  if (!parsed) return Status::Corruption("meta: active version is not an 8-byte value");
  *version = *parsed;
  return Status::Ok();
}

Status Store::Impl::PinnedVersions(const rocksdb::ReadOptions& ro, std::set<uint64_t>* out) const {
  out->clear();
  std::string value;
  Status s = Get(ro, meta, keys::kMetaPinnedVersions, &value, "meta: pinned versions");
  if (s.IsNotFound()) return Status::Ok();
  PLUMB_RETURN_IF_ERROR(s);
  if (value.size() % 8 != 0) {
    return Status::Corruption("meta: pinned versions hold " + std::to_string(value.size()) +
                              " bytes, not a multiple of 8");
  }
  for (size_t at = 0; at < value.size(); at += 8) {
    out->insert(keys::ReadBigEndian64(value.data() + at));
  }
  return Status::Ok();
}

Status Store::Impl::ReadManifestLocked(const rocksdb::ReadOptions& ro, uint64_t version,
                                       VersionManifest* out, uint32_t* rows_per_block) const {
  std::string value;
  Status s = Get(ro, models, keys::ManifestKey(version), &value, VersionWhat(version, "manifest"));
  if (s.IsNotFound()) {
    return Status::NotFound("version " + std::to_string(version) + " is not stored");
  }
  PLUMB_RETURN_IF_ERROR(s);
  std::string why;
  if (!records::DecodeManifest(value, version, out, rows_per_block, &why)) {
    return Status::Corruption(VersionWhat(version, "manifest: ") + why);
  }
  return Status::Ok();
}

Status Store::Impl::ReadBlocks(const rocksdb::ReadOptions& ro, uint64_t version,
                               std::string_view what,
                               const std::function<std::string(uint32_t)>& key_of, uint64_t rows,
                               uint64_t row_bytes, uint32_t rows_per_block, char* dest) const {
  const uint64_t blocks = BlockCount(rows, rows_per_block);
  if (blocks > UINT32_MAX)
    return Status::Corruption(VersionWhat(version, what) + ": too many blocks");
  rocksdb::PinnableSlice value;
  for (uint64_t b = 0; b < blocks; ++b) {
    const uint64_t first_row = b * rows_per_block;
    const uint64_t block_rows = std::min<uint64_t>(rows_per_block, rows - first_row);
    const uint64_t expected = block_rows * row_bytes;
    const std::string name = VersionWhat(version, what) + ": block " + std::to_string(b);
    value.Reset();
    rocksdb::Status s = db->Get(ro, models, AsSlice(key_of(static_cast<uint32_t>(b))), &value);
    if (s.IsNotFound()) return Status::Corruption(name + " is missing");
    PLUMB_RETURN_IF_ERROR(FromRocks(s, name));
    if (value.size() != expected) {
      return Status::Corruption(name + " holds " + std::to_string(value.size()) +
                                " bytes, expected " + std::to_string(expected));
    }
    if (dest != nullptr && expected > 0) {
      std::memcpy(dest + first_row * row_bytes, value.data(), expected);
    }
  }
  return Status::Ok();
}

Status Store::Impl::CheckComplete(const rocksdb::ReadOptions& ro, uint64_t version) const {
  VersionManifest manifest;
  uint32_t rpb = 0;
  PLUMB_RETURN_IF_ERROR(ReadManifestLocked(ro, version, &manifest, &rpb));
  const uint64_t row_bytes = uint64_t{manifest.dim} * sizeof(float);
  for (MatrixKind kind : {MatrixKind::kUsers, MatrixKind::kItems}) {
    const uint64_t rows = kind == MatrixKind::kUsers ? manifest.num_users : manifest.num_items;
    PLUMB_RETURN_IF_ERROR(ReadBlocks(
        ro, version, std::string(keys::MatrixName(kind)) + " matrix",
        [&](uint32_t b) { return keys::BlockKey(version, kind, b); }, rows, row_bytes, rpb,
        nullptr));
  }
  return ReadBlocks(
      ro, version, "item degrees", [&](uint32_t b) { return keys::VersionDegreesKey(version, b); },
      manifest.num_items, sizeof(uint32_t), rpb, nullptr);
}

Status Store::Impl::DeleteVersion(const rocksdb::ReadOptions& ro, uint64_t version,
                                  rocksdb::WriteBatch* batch) const {
  // Per-key deletes rather than range deletes: a version has few blocks, and point
  // tombstones keep every reader (and the secondary's replay) on the simplest path.
  for (const std::string& prefix :
       {keys::BlockPrefix(version), keys::VersionDegreesPrefix(version)}) {
    std::unique_ptr<rocksdb::Iterator> it(db->NewIterator(ro, models));
    for (it->Seek(AsSlice(prefix)); it->Valid() && StartsWith(it->key(), prefix); it->Next()) {
      PLUMB_RETURN_IF_ERROR(FromRocks(batch->Delete(models, it->key()), "pruning"));
    }
    PLUMB_RETURN_IF_ERROR(FromRocks(it->status(), VersionWhat(version, "pruning")));
  }
  return FromRocks(batch->Delete(models, AsSlice(keys::ManifestKey(version))), "pruning");
}

Status Store::Impl::CheckFreeSpace(uint64_t bytes, const std::string& what) const {
  if (options.min_free_disk_bytes == 0) return Status::Ok();
  struct statvfs fs {};
  if (::statvfs(dir.c_str(), &fs) != 0) return Status::Ok();  // cannot tell: let RocksDB try
  const uint64_t free = static_cast<uint64_t>(fs.f_bavail) * fs.f_frsize;
  // The write-ahead log holds the batch once, the table files once more after a flush.
  if (free >= options.min_free_disk_bytes + 2 * bytes) return Status::Ok();
  return Status::ResourceExhausted(
      what + ": No space left for it: the disk holding " + dir + " has " +
      std::to_string(free >> 20) + " MB free, at or below the " +
      std::to_string(options.min_free_disk_bytes >> 20) +
      " MB kept free for the store's own upkeep; nothing was written. Free space (or move the "
      "store); writing resumes by itself");
}

// ---- opening --------------------------------------------------------------------------

Store::Store(std::unique_ptr<Impl> impl) : impl_(std::move(impl)) {}
Store::~Store() = default;

Status Store::OpenPrimary(const std::string& dir, const StoreOptions& options,
                          std::unique_ptr<Store>* out) {
  out->reset();
  if (options.keep_versions < 1) return Status::InvalidArgument("keep_versions must be at least 1");
  if (options.rows_per_block < 1) {
    return Status::InvalidArgument("rows_per_block must be at least 1");
  }
  if (options.dedup_window_ms < 0) {
    return Status::InvalidArgument("dedup_window_ms must not be negative");
  }

  auto impl = std::make_unique<Impl>();
  impl->primary = true;
  impl->options = options;
  impl->dir = dir;
  if (options.dedup_window_ms > 0) {
    impl->expiry = std::make_unique<EventIdExpiry>(options.dedup_window_ms);
  }

  if (options.create_if_missing) {
    // RocksDB takes a directory without CURRENT for a new database, and the new database's
    // first clean-up deletes every table file it does not know: a store that lost CURRENT
    // would be wiped. Refuse instead.
    const std::string files = StoreFilesWithoutCurrent(dir);
    if (!files.empty()) {
      return Status::Corruption("store at " + dir + " is damaged: it holds " + files +
                                " but no CURRENT file; plumb will not create a new store over "
                                "them." +
                                DamageAdvice(dir));
    }
  }

  rocksdb::DBOptions db_options;
  db_options.create_if_missing = options.create_if_missing;
  db_options.create_missing_column_families = options.create_if_missing;
  db_options.keep_log_file_num = 5;
  // A secondary (plumb-serve, plumb-load --db) replays every live WAL file into memory when it
  // opens. A family with a small, rarely full memtable (events, meta) keeps old WAL files
  // alive, and with them every version block written since; this bound makes RocksDB flush
  // such families once the WAL passes it. (Found when a store holding one 100k x 64 version
  // plus 200k users took plumb-serve ~20 s to open.)
  db_options.max_total_wal_size = 256ull << 20;
  // One budget for the memtables of every family together (RocksDB's WriteBufferManager):
  // without it each of the nine families may hold up to two 64 MB memtables, and the
  // trainer's resident memory creeps up by the size of whatever the slow families (ids,
  // interactions, pair_history, meta) have buffered. A full budget flushes the largest.
  db_options.db_write_buffer_size = 128ull << 20;

  rocksdb::BlockBasedTableOptions lookup_table;
  lookup_table.filter_policy.reset(rocksdb::NewBloomFilterPolicy(10));

  std::vector<rocksdb::ColumnFamilyDescriptor> descriptors;
  descriptors.emplace_back(rocksdb::kDefaultColumnFamilyName, rocksdb::ColumnFamilyOptions());
  for (const char* name : kFamilies) {
    rocksdb::ColumnFamilyOptions cf;
    const std::string_view n = name;
    if (n == keys::kEventIdsFamily || n == keys::kIdsFamily) {
      // Point lookups of mostly absent keys (new event ids, new external ids).
      cf.table_factory.reset(rocksdb::NewBlockBasedTableFactory(lookup_table));
    }
    if (n == keys::kEventIdsFamily) cf.compaction_filter = impl->expiry.get();
    // float32 embeddings hardly compress; don't spend CPU on it.
    if (n == keys::kModelsFamily) cf.compression = rocksdb::kNoCompression;
    descriptors.emplace_back(name, cf);
  }
  // RocksDB insists on opening every family present; keep any we don't know untouched.
  std::vector<std::string> existing;
  if (rocksdb::DB::ListColumnFamilies(db_options, dir, &existing).ok()) {
    for (const std::string& name : existing) {
      bool known = false;
      for (const auto& d : descriptors) known = known || d.name == name;
      if (!known) descriptors.emplace_back(name, rocksdb::ColumnFamilyOptions());
    }
  }

  rocksdb::DB* db = nullptr;
  std::vector<rocksdb::ColumnFamilyHandle*> handles;
  PLUMB_RETURN_IF_ERROR(FromRocks(rocksdb::DB::Open(db_options, dir, descriptors, &handles, &db),
                                  "opening store " + dir));
  impl->db = db;
  impl->handles = handles;
  impl->AssignHandles(std::vector<bool>(kNumFamilies, true));

  PLUMB_RETURN_IF_ERROR(impl->LoadCounters(rocksdb::ReadOptions()));
  if (!impl->log_bytes_known.load()) {
    // A store from before the log's size was recorded: count it once and record it.
    uint64_t bytes = 0;
    PLUMB_RETURN_IF_ERROR(impl->CountLogBytes(rocksdb::ReadOptions(), &bytes));
    rocksdb::WriteBatch batch;
    batch.Put(impl->meta, AsSlice(keys::kMetaLogBytes), AsSlice(keys::Fixed64(bytes)));
    PLUMB_RETURN_IF_ERROR(impl->Write(&batch, "recording the event log's size"));
    impl->log_bytes_appended.store(bytes);
    impl->log_bytes_known.store(true);
  }
  out->reset(new Store(std::move(impl)));
  return Status::Ok();
}

Status Store::OpenSecondary(const std::string& dir, const std::string& scratch_dir,
                            std::unique_ptr<Store>* out) {
  out->reset();
  std::error_code ec;
  std::filesystem::create_directories(scratch_dir, ec);
  if (ec) return Status::IoError("creating " + scratch_dir + ": " + ec.message());
  // A secondary opens whatever consistent state it can: with a table file missing it
  // would show older data as current. Find such damage first.
  PLUMB_RETURN_IF_ERROR(CheckFiles(dir, scratch_dir));

  rocksdb::DBOptions db_options;
  // A secondary must keep every table file open: the primary may delete a file after a
  // compaction, and an open handle keeps it readable until the next catch-up.
  db_options.max_open_files = -1;
  db_options.keep_log_file_num = 5;

  std::vector<std::string> existing;
  rocksdb::Status listed = rocksdb::DB::ListColumnFamilies(db_options, dir, &existing);
  if (!listed.ok()) return Status::NotFound("no plumb store at " + dir + ": " + listed.ToString());
  std::vector<bool> present(kNumFamilies, true);
  std::vector<rocksdb::ColumnFamilyDescriptor> descriptors;
  descriptors.emplace_back(rocksdb::kDefaultColumnFamilyName, rocksdb::ColumnFamilyOptions());
  for (size_t k = 0; k < kNumFamilies; ++k) {
    const char* name = kFamilies[k];
    if (std::find(existing.begin(), existing.end(), name) == existing.end()) {
      if (OptionalOnFollower(name)) {
        present[k] = false;
        continue;
      }
      return Status::FailedPrecondition("store at " + dir + " has no column family " + name +
                                        "; open it once as the primary");
    }
    descriptors.emplace_back(name, rocksdb::ColumnFamilyOptions());
  }

  auto impl = std::make_unique<Impl>();
  impl->primary = false;
  impl->dir = dir;
  impl->scratch_dir = scratch_dir;
  rocksdb::DB* db = nullptr;
  std::vector<rocksdb::ColumnFamilyHandle*> handles;
  PLUMB_RETURN_IF_ERROR(FromRocks(
      rocksdb::DB::OpenAsSecondary(db_options, dir, scratch_dir, descriptors, &handles, &db),
      "opening store " + dir + " as secondary"));
  impl->db = db;
  impl->handles = handles;
  impl->AssignHandles(present);

  PLUMB_RETURN_IF_ERROR(impl->LoadCounters(rocksdb::ReadOptions()));
  out->reset(new Store(std::move(impl)));
  return Status::Ok();
}

bool Store::is_primary() const { return impl_->primary; }

Status Store::CatchUp() {
  if (impl_->primary) return Status::Ok();
  std::unique_lock lock(impl_->view_mu);
  PLUMB_RETURN_IF_ERROR(
      FromRocks(impl_->db->TryCatchUpWithPrimary(), "catching up with the primary"));
  return impl_->LoadCounters(rocksdb::ReadOptions());
}

// ---- event log ------------------------------------------------------------------------

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

// ---- training state -------------------------------------------------------------------

Status Store::GetCursor(uint64_t* seq) const {
  *seq = 0;
  Impl::ReadView view(*impl_);
  std::string value;
  Status s = impl_->Get(view.options(), impl_->meta, keys::kMetaCursor, &value, "meta: cursor");
  if (s.IsNotFound()) return Status::Ok();
  PLUMB_RETURN_IF_ERROR(s);
  auto parsed = keys::ParseFixed64(value);
  if (!parsed) return Status::Corruption("meta: cursor is not an 8-byte value");
  *seq = *parsed;
  return Status::Ok();
}

Status Store::LookupId(IdSpace space, std::string_view external, uint32_t* index) const {
  Impl::ReadView view(*impl_);
  std::string value;
  const std::string what =
      std::string(keys::SpaceName(space)) + " id '" + std::string(external) + "'";
  Status s =
      impl_->Get(view.options(), impl_->ids, keys::IdByExternalKey(space, external), &value, what);
  if (s.IsNotFound()) return Status::NotFound("no " + what);
  PLUMB_RETURN_IF_ERROR(s);
  auto parsed = keys::ParseFixed32(value);
  if (!parsed) return Status::Corruption("ids: " + what + " maps to a malformed index");
  *index = *parsed;
  return Status::Ok();
}

uint32_t Store::IdCount(IdSpace space) const { return impl_->Count(space).load(); }

Status Store::LoadIds(IdSpace space, uint32_t count, std::vector<std::string>* out) const {
  out->clear();
  // The count first: the view taken after it holds at least that many entries (the count
  // grows only after the write that adds them).
  const uint32_t stored = IdCount(space);
  Impl::ReadView view(*impl_);
  const std::string name(keys::SpaceName(space));
  if (count > stored) {
    return Status::InvalidArgument("asked for " + std::to_string(count) + " " + name +
                                   " ids; the dictionary holds " + std::to_string(stored));
  }
  out->reserve(count);
  const std::string prefix = keys::ExternalByIdPrefix(space);
  std::unique_ptr<rocksdb::Iterator> it(impl_->db->NewIterator(view.options(), impl_->ids));
  it->Seek(AsSlice(prefix));
  for (uint32_t expect = 0; expect < count; ++expect, it->Next()) {
    if (!it->Valid() || !StartsWith(it->key(), prefix) || it->key().size() != prefix.size() + 4) {
      PLUMB_RETURN_IF_ERROR(FromRocks(it->status(), "ids: loading " + name + " ids"));
      return Status::Corruption("ids: " + name + " index " + std::to_string(expect) +
                                " is missing");
    }
    const uint32_t index = keys::ReadBigEndian32(it->key().data() + prefix.size());
    if (index != expect) {
      return Status::Corruption("ids: " + name + " index " + std::to_string(expect) +
                                " is missing");
    }
    if (it->value().empty()) {
      return Status::Corruption("ids: " + name + " index " + std::to_string(expect) +
                                " has an empty external id");
    }
    out->emplace_back(it->value().data(), it->value().size());
  }
  return FromRocks(it->status(), "ids: loading " + name + " ids");
}

Status Store::ForEachInteraction(const std::function<void(uint32_t, uint32_t)>& fn) const {
  Impl::ReadView view(*impl_);
  std::unique_ptr<rocksdb::Iterator> it(
      impl_->db->NewIterator(view.options(), impl_->interactions));
  for (it->SeekToFirst(); it->Valid(); it->Next()) {
    if (it->key().size() != 8) return Status::Corruption("interactions: a key is not 8 bytes");
    fn(keys::ReadBigEndian32(it->key().data()), keys::ReadBigEndian32(it->key().data() + 4));
  }
  return FromRocks(it->status(), "reading interactions");
}

Status Store::UserItems(uint32_t user, std::vector<uint32_t>* items) const {
  items->clear();
  Impl::ReadView view(*impl_);
  const std::string prefix = keys::InteractionPrefix(user);
  std::unique_ptr<rocksdb::Iterator> it(
      impl_->db->NewIterator(view.options(), impl_->interactions));
  for (it->Seek(AsSlice(prefix)); it->Valid() && StartsWith(it->key(), prefix); it->Next()) {
    if (it->key().size() != 8) return Status::Corruption("interactions: a key is not 8 bytes");
    items->push_back(keys::ReadBigEndian32(it->key().data() + 4));
  }
  return FromRocks(it->status(), "reading the items of user " + std::to_string(user));
}

Status Store::LoadItemDegrees(std::vector<uint32_t>* degrees) const {
  Impl::ReadView view(*impl_);
  const uint32_t count = IdCount(IdSpace::kItem);
  degrees->assign(count, 0);
  std::unique_ptr<rocksdb::Iterator> it(impl_->db->NewIterator(view.options(), impl_->degrees));
  for (it->SeekToFirst(); it->Valid(); it->Next()) {
    if (it->key().size() != 4) return Status::Corruption("degrees: a key is not 4 bytes");
    const uint32_t item = keys::ReadBigEndian32(it->key().data());
    auto degree = keys::ParseFixed32(AsView(it->value()));
    if (!degree) {
      return Status::Corruption("degrees: item " + std::to_string(item) + " has a malformed value");
    }
    if (item >= count) {
      return Status::Corruption("degrees: item " + std::to_string(item) +
                                " is beyond the item dictionary (" + std::to_string(count) + ")");
    }
    (*degrees)[item] = *degree;
  }
  return FromRocks(it->status(), "reading item degrees");
}

// ---- Commit ---------------------------------------------------------------------------

// Checks one dictionary extension; `count` is the dictionary size before the change.
Status Store::Impl::CheckNewIds(
    IdSpace space, uint32_t count,
    const std::vector<std::pair<uint32_t, std::string>>& entries) const {
  const std::string name(keys::SpaceName(space));
  std::unordered_set<std::string_view> seen;
  std::string value;
  for (size_t k = 0; k < entries.size(); ++k) {
    const auto& [index, external] = entries[k];
    const uint64_t expect = uint64_t{count} + k;
    if (expect >= UINT32_MAX) return Status::InvalidArgument(name + " dictionary is full");
    if (index != expect) {
      return Status::InvalidArgument("new " + name + " '" + external + "' has index " +
                                     std::to_string(index) + "; the next free index is " +
                                     std::to_string(expect));
    }
    if (external.empty()) {
      return Status::InvalidArgument("new " + name + " index " + std::to_string(index) +
                                     " has an empty external id");
    }
    if (!seen.insert(external).second) {
      return Status::InvalidArgument(name + " id '" + external + "' is added twice");
    }
    Status s = Get(rocksdb::ReadOptions(), ids, keys::IdByExternalKey(space, external), &value,
                   name + " id '" + external + "'");
    if (s.ok()) {
      return Status::InvalidArgument(name + " id '" + external + "' already has an index");
    }
    if (!s.IsNotFound()) return s;
  }
  return Status::Ok();
}

namespace {

Status CheckMatrix(const MatrixView& view, uint32_t rows, uint32_t dim, std::string_view name) {
  if (view.rows != rows || view.dim != dim) {
    return Status::InvalidArgument(std::string(name) + " matrix is " + std::to_string(view.rows) +
                                   " x " + std::to_string(view.dim) + "; the manifest says " +
                                   std::to_string(rows) + " x " + std::to_string(dim));
  }
  if (view.data == nullptr && uint64_t{rows} * dim > 0) {
    return Status::InvalidArgument(std::string(name) + " matrix has no data");
  }
  return Status::Ok();
}

// Puts `rows` rows of `row_bytes` bytes each as blocks of rows_per_block rows.
void PutBlocks(rocksdb::WriteBatch* batch, rocksdb::ColumnFamilyHandle* cf, const char* data,
               uint64_t rows, uint64_t row_bytes, uint32_t rows_per_block,
               const std::function<std::string(uint32_t)>& key_of) {
  const uint64_t blocks = BlockCount(rows, rows_per_block);
  for (uint64_t b = 0; b < blocks; ++b) {
    const uint64_t first = b * rows_per_block;
    const uint64_t n = std::min<uint64_t>(rows_per_block, rows - first);
    batch->Put(cf, AsSlice(key_of(static_cast<uint32_t>(b))),
               rocksdb::Slice(data + first * row_bytes, n * row_bytes));
  }
}

}  // namespace

Status Store::Commit(const StateChange& change, uint64_t* published) {
  if (published != nullptr) *published = 0;
  PLUMB_RETURN_IF_ERROR(impl_->RequirePrimary("Commit"));
  std::lock_guard write_lock(impl_->write_mu);
  Impl& d = *impl_;
  // This thread is the only writer: plain reads see the latest state.
  const rocksdb::ReadOptions ro;

  // -- validate everything before writing anything --
  const uint32_t users_before = d.user_count.load();
  const uint32_t items_before = d.item_count.load();
  PLUMB_RETURN_IF_ERROR(d.CheckNewIds(IdSpace::kUser, users_before, change.new_users));
  PLUMB_RETURN_IF_ERROR(d.CheckNewIds(IdSpace::kItem, items_before, change.new_items));
  const uint32_t users_after = users_before + static_cast<uint32_t>(change.new_users.size());
  const uint32_t items_after = items_before + static_cast<uint32_t>(change.new_items.size());

  for (const auto& [user, item] : change.new_interactions) {
    if (user >= users_after || item >= items_after) {
      return Status::InvalidArgument("interaction (" + std::to_string(user) + ", " +
                                     std::to_string(item) + ") names an unknown user or item (" +
                                     std::to_string(users_after) + " users, " +
                                     std::to_string(items_after) + " items)");
    }
  }
  for (const auto& [item, degree] : change.item_degrees) {
    if (item >= items_after) {
      return Status::InvalidArgument("degree for unknown item " + std::to_string(item) + " (" +
                                     std::to_string(items_after) + " items)");
    }
  }
  if (change.cursor && *change.cursor > d.last_seq.load()) {
    return Status::InvalidArgument("cursor " + std::to_string(*change.cursor) +
                                   " is beyond the end of the event log (" +
                                   std::to_string(d.last_seq.load()) + ")");
  }
  for (const auto& [key, value] : change.meta) {
    if (key.empty()) return Status::InvalidArgument("meta key is empty");
    if (key.starts_with(keys::kReservedMetaPrefix)) {
      return Status::InvalidArgument("meta key '" + key + "' uses the reserved prefix 'plumb.'");
    }
  }

  uint64_t version = 0;
  VersionManifest manifest;
  if (change.version != nullptr) {
    const VersionWrite& v = *change.version;
    manifest = v.manifest;
    if (manifest.dim == 0) return Status::InvalidArgument("version dimension is 0");
    PLUMB_RETURN_IF_ERROR(CheckMatrix(v.users, manifest.num_users, manifest.dim, "users"));
    PLUMB_RETURN_IF_ERROR(CheckMatrix(v.items, manifest.num_items, manifest.dim, "items"));
    if (v.item_degrees.size() != manifest.num_items) {
      return Status::InvalidArgument("version has " + std::to_string(v.item_degrees.size()) +
                                     " item degrees for " + std::to_string(manifest.num_items) +
                                     " items");
    }
    if (manifest.num_users > users_after || manifest.num_items > items_after) {
      return Status::InvalidArgument(
          "version has " + std::to_string(manifest.num_users) + " users and " +
          std::to_string(manifest.num_items) + " items; the dictionaries hold " +
          std::to_string(users_after) + " and " + std::to_string(items_after));
    }
    if (static_cast<int>(manifest.gate) < static_cast<int>(GateOutcome::kUnspecified) ||
        static_cast<int>(manifest.gate) > static_cast<int>(GateOutcome::kSkipped)) {
      return Status::InvalidArgument("version has an unknown gate outcome");
    }
    if (manifest.created_ms < 0) return Status::InvalidArgument("version created_ms is negative");
    if (manifest.created_ms == 0) manifest.created_ms = NowMs();
    if (manifest.version == 0) {
      manifest.version = d.next_version;
    } else if (manifest.version < d.next_version) {
      return Status::InvalidArgument("version " + std::to_string(manifest.version) +
                                     " is not newer than every version published so far (next " +
                                     std::to_string(d.next_version) + ")");
    }
    version = manifest.version;
  } else if (change.activate_published) {
    return Status::InvalidArgument("activate_published without a version");
  }

  uint64_t active = 0;
  PLUMB_RETURN_IF_ERROR(d.ActiveVersion(ro, &active));
  uint64_t new_active = active;
  if (change.activate_published) {
    new_active = version;
  } else if (change.activate) {
    Status s = d.CheckComplete(ro, *change.activate);
    if (s.IsNotFound()) return s;
    if (!s.ok()) {
      return Status::FailedPrecondition("cannot activate version " +
                                        std::to_string(*change.activate) + ": " + s.message());
    }
    new_active = *change.activate;
  }

  // -- one batch --
  rocksdb::WriteBatch batch;
  for (IdSpace space : {IdSpace::kUser, IdSpace::kItem}) {
    for (const auto& [index, external] :
         space == IdSpace::kUser ? change.new_users : change.new_items) {
      batch.Put(d.ids, AsSlice(keys::IdByExternalKey(space, external)),
                AsSlice(keys::Fixed32(index)));
      batch.Put(d.ids, AsSlice(keys::ExternalByIdKey(space, index)), AsSlice(external));
    }
  }
  for (const auto& [user, item] : change.new_interactions) {
    batch.Put(d.interactions, AsSlice(keys::InteractionKey(user, item)), rocksdb::Slice());
  }
  for (const auto& [item, degree] : change.item_degrees) {
    batch.Put(d.degrees, AsSlice(keys::DegreeKey(item)), AsSlice(keys::Fixed32(degree)));
  }
  if (change.cursor) {
    batch.Put(d.meta, AsSlice(keys::kMetaCursor), AsSlice(keys::Fixed64(*change.cursor)));
  }
  for (const auto& [key, value] : change.meta) batch.Put(d.meta, AsSlice(key), AsSlice(value));

  if (change.version != nullptr) {
    const VersionWrite& v = *change.version;
    const uint32_t rpb = d.options.rows_per_block;
    const uint64_t row_bytes = uint64_t{manifest.dim} * sizeof(float);
    batch.Put(d.models, AsSlice(keys::ManifestKey(version)),
              AsSlice(records::EncodeManifest(manifest, rpb)));
    PutBlocks(&batch, d.models, reinterpret_cast<const char*>(v.users.data), manifest.num_users,
              row_bytes, rpb,
              [&](uint32_t b) { return keys::BlockKey(version, MatrixKind::kUsers, b); });
    PutBlocks(&batch, d.models, reinterpret_cast<const char*>(v.items.data), manifest.num_items,
              row_bytes, rpb,
              [&](uint32_t b) { return keys::BlockKey(version, MatrixKind::kItems, b); });
    PutBlocks(&batch, d.models, reinterpret_cast<const char*>(v.item_degrees.data()),
              manifest.num_items, sizeof(uint32_t), rpb,
              [&](uint32_t b) { return keys::VersionDegreesKey(version, b); });
    batch.Put(d.meta, AsSlice(keys::kMetaNextVersion), AsSlice(keys::Fixed64(version + 1)));

    // Keep the newest keep_versions versions, every version younger than
    // keep_versions_for_ms, and the active and pinned ones whatever their rank or age.
    std::vector<uint64_t> versions;
    PLUMB_RETURN_IF_ERROR(d.ListVersionNumbers(ro, &versions));
    versions.push_back(version);
    std::sort(versions.rbegin(), versions.rend());
    std::set<uint64_t> pinned;
    PLUMB_RETURN_IF_ERROR(d.PinnedVersions(ro, &pinned));
    const int64_t now_ms = NowMs();
    for (size_t k = d.options.keep_versions; k < versions.size(); ++k) {
      if (versions[k] == new_active || pinned.contains(versions[k])) continue;
      if (d.options.keep_versions_for_ms > 0) {
        VersionManifest old;
        uint32_t old_rpb = 0;
        PLUMB_RETURN_IF_ERROR(d.ReadManifestLocked(ro, versions[k], &old, &old_rpb));
        if (now_ms - old.created_ms < d.options.keep_versions_for_ms) continue;
      }
      PLUMB_RETURN_IF_ERROR(d.DeleteVersion(ro, versions[k], &batch));
    }
  }
  if (new_active != active) {
    batch.Put(d.meta, AsSlice(keys::kMetaActiveVersion), AsSlice(keys::Fixed64(new_active)));
  }

  if (batch.Count() > 0) PLUMB_RETURN_IF_ERROR(d.Write(&batch, "committing state"));
  d.user_count.store(users_after);
  d.item_count.store(items_after);
  if (version != 0) d.next_version = version + 1;
  if (published != nullptr) *published = version;
  return Status::Ok();
}

// ---- versions -------------------------------------------------------------------------

Status Store::GetActiveVersion(uint64_t* version) const {
  Impl::ReadView view(*impl_);
  return impl_->ActiveVersion(view.options(), version);
}

Status Store::ListVersions(std::vector<VersionManifest>* out) const {
  out->clear();
  Impl::ReadView view(*impl_);
  std::vector<uint64_t> versions;
  PLUMB_RETURN_IF_ERROR(impl_->ListVersionNumbers(view.options(), &versions));
  std::set<uint64_t> pinned;
  PLUMB_RETURN_IF_ERROR(impl_->PinnedVersions(view.options(), &pinned));
  for (auto v = versions.rbegin(); v != versions.rend(); ++v) {
    VersionManifest manifest;
    uint32_t rpb = 0;
    Status s = impl_->ReadManifestLocked(view.options(), *v, &manifest, &rpb);
    // Listed a moment ago under the same view, so a NotFound here is damage too.
    if (s.IsNotFound()) return Status::Corruption(VersionWhat(*v, "manifest vanished"));
    PLUMB_RETURN_IF_ERROR(s);
    manifest.pinned = pinned.contains(*v);
    out->push_back(std::move(manifest));
  }
  return Status::Ok();
}

Status Store::ReadManifest(uint64_t version, VersionManifest* out) const {
  Impl::ReadView view(*impl_);
  uint32_t rpb = 0;
  PLUMB_RETURN_IF_ERROR(impl_->ReadManifestLocked(view.options(), version, out, &rpb));
  std::set<uint64_t> pinned;
  PLUMB_RETURN_IF_ERROR(impl_->PinnedVersions(view.options(), &pinned));
  out->pinned = pinned.contains(version);
  return Status::Ok();
}

Status Store::ReadMatrix(uint64_t version, MatrixKind kind, std::span<float> dest) const {
  Impl::ReadView view(*impl_);
  VersionManifest manifest;
  uint32_t rpb = 0;
  PLUMB_RETURN_IF_ERROR(impl_->ReadManifestLocked(view.options(), version, &manifest, &rpb));
  const uint64_t rows = kind == MatrixKind::kUsers ? manifest.num_users : manifest.num_items;
  const std::string what = std::string(keys::MatrixName(kind)) + " matrix";
  if (dest.size() != rows * manifest.dim) {
    return Status::InvalidArgument("destination holds " + std::to_string(dest.size()) +
                                   " floats; " + VersionWhat(version, what) + " has " +
                                   std::to_string(rows) + " x " + std::to_string(manifest.dim));
  }
  rocksdb::ReadOptions ro = view.options();
  ro.fill_cache = false;  // read once into the caller's buffer; keep the cache for lookups
  return impl_->ReadBlocks(
      ro, version, what, [&](uint32_t b) { return keys::BlockKey(version, kind, b); }, rows,
      uint64_t{manifest.dim} * sizeof(float), rpb, reinterpret_cast<char*>(dest.data()));
}

Status Store::ReadVersionDegrees(uint64_t version, std::vector<uint32_t>* out) const {
  out->clear();
  Impl::ReadView view(*impl_);
  VersionManifest manifest;
  uint32_t rpb = 0;
  PLUMB_RETURN_IF_ERROR(impl_->ReadManifestLocked(view.options(), version, &manifest, &rpb));
  std::vector<uint32_t> degrees(manifest.num_items);
  PLUMB_RETURN_IF_ERROR(impl_->ReadBlocks(
      view.options(), version, "item degrees",
      [&](uint32_t b) { return keys::VersionDegreesKey(version, b); }, manifest.num_items,
      sizeof(uint32_t), rpb, reinterpret_cast<char*>(degrees.data())));
  *out = std::move(degrees);
  return Status::Ok();
}

Status Store::Activate(uint64_t version) {
  PLUMB_RETURN_IF_ERROR(impl_->RequirePrimary("Activate"));
  std::lock_guard write_lock(impl_->write_mu);
  Status s = impl_->CheckComplete(rocksdb::ReadOptions(), version);
  if (s.IsNotFound()) return s;
  if (!s.ok()) {
    return Status::FailedPrecondition("cannot activate version " + std::to_string(version) + ": " +
                                      s.message());
  }
  rocksdb::WriteBatch batch;
  batch.Put(impl_->meta, AsSlice(keys::kMetaActiveVersion), AsSlice(keys::Fixed64(version)));
  return impl_->Write(&batch, "activating version " + std::to_string(version));
}

Status Store::SetPinned(uint64_t version, bool pinned) {
  PLUMB_RETURN_IF_ERROR(impl_->RequirePrimary("SetPinned"));
  std::lock_guard write_lock(impl_->write_mu);
  const rocksdb::ReadOptions ro;
  VersionManifest manifest;
  uint32_t rpb = 0;
  PLUMB_RETURN_IF_ERROR(impl_->ReadManifestLocked(ro, version, &manifest, &rpb));
  std::set<uint64_t> pins;
  PLUMB_RETURN_IF_ERROR(impl_->PinnedVersions(ro, &pins));
  if (pins.contains(version) == pinned) return Status::Ok();
  if (pinned) {
    pins.insert(version);
  } else {
    pins.erase(version);
  }
  std::string value;
  for (uint64_t v : pins) keys::PutBigEndian64(&value, v);
  rocksdb::WriteBatch batch;
  batch.Put(impl_->meta, AsSlice(keys::kMetaPinnedVersions), AsSlice(value));
  return impl_->Write(&batch, std::string(pinned ? "pinning" : "unpinning") + " version " +
                                  std::to_string(version));
}

Status Store::GetMeta(std::string_view key, std::string* value) const {
  Impl::ReadView view(*impl_);
  Status s = impl_->Get(view.options(), impl_->meta, key, value, "meta");
  if (s.IsNotFound()) return Status::NotFound("meta value '" + std::string(key) + "' is not set");
  return s;
}

}  // namespace plumb::store
