// Store: opening by role, catching up, the counters every Store keeps in memory, the free-space
// check of every write, and the caller's meta values.
#include "store/store.h"

#include <sys/statvfs.h>

#include <algorithm>
#include <filesystem>

#include "store/db.h"
#include "store/keys.h"
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
  const MetaReader stored = Meta(ro);
  std::optional<uint64_t> recorded;
  PLUMB_RETURN_IF_ERROR(stored.GetU64(keys::kMetaLastSequence, &recorded));
  last = std::max(last, recorded.value_or(0));
  last_seq.store(last);

  PLUMB_RETURN_IF_ERROR(stored.GetU64(keys::kMetaLogBytes, &recorded));
  // Unset in a store written before the size was recorded (or an empty one): the primary
  // counts it once when it opens (OpenPrimary); a follower counts on demand (GetLogStats).
  log_bytes_appended.store(recorded.value_or(0));
  log_bytes_known.store(recorded.has_value() || last == 0);

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
    PLUMB_RETURN_IF_ERROR(stored.GetU64(keys::kMetaNextVersion, &recorded));
    uint64_t next = std::max<uint64_t>(1, recorded.value_or(1));
    std::vector<uint64_t> versions;
    PLUMB_RETURN_IF_ERROR(ListVersionNumbers(ro, &versions));
    if (!versions.empty()) next = std::max(next, versions.back() + 1);
    next_version = next;
  }
  return Status::Ok();
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
  return Impl::OpenPrimary(dir, options, nullptr, out);
}

Status Store::Impl::OpenPrimary(const std::string& dir, const StoreOptions& options,
                                std::unique_ptr<rocksdb::Env> env, std::unique_ptr<Store>* out) {
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
  impl->env = std::move(env);
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

  DbOpenArgs args;
  args.dir = dir;
  args.create_if_missing = options.create_if_missing;
  args.event_id_filter = impl->expiry.get();
  args.env = impl->env.get();
  PLUMB_RETURN_IF_ERROR(impl->Attach(DbRole::kPrimary, args));

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

  auto impl = std::make_unique<Impl>();
  impl->primary = false;
  impl->dir = dir;
  impl->scratch_dir = scratch_dir;
  DbOpenArgs args;
  args.dir = dir;
  args.scratch_dir = scratch_dir;
  PLUMB_RETURN_IF_ERROR(impl->Attach(DbRole::kSecondary, args));

  PLUMB_RETURN_IF_ERROR(impl->LoadCounters(rocksdb::ReadOptions()));
  out->reset(new Store(std::move(impl)));
  return Status::Ok();
}

Status Store::Impl::Attach(DbRole role, const DbOpenArgs& args) {
  OpenedDb opened;
  PLUMB_RETURN_IF_ERROR(OpenDb(role, args, &opened));
  db = opened.db;
  handles = std::move(opened.handles);
  static_assert(kNumFamilies == 8);
  rocksdb::ColumnFamilyHandle** slots[kNumFamilies] = {&events,  &event_ids, &ids,  &interactions,
                                                       &degrees, &models,    &meta, &pair_history};
  size_t next = 1;  // handles[0] is RocksDB's default family
  for (size_t k = 0; k < kNumFamilies; ++k) {
    *slots[k] = opened.present[k] ? handles[next++] : nullptr;
  }
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

Status Store::GetMeta(std::string_view key, std::string* value) const {
  Impl::ReadView view(*impl_);
  std::optional<std::string> stored;
  PLUMB_RETURN_IF_ERROR(impl_->Meta(view.options()).GetString(key, &stored));
  if (!stored) return Status::NotFound("meta value '" + std::string(key) + "' is not set");
  *value = std::move(*stored);
  return Status::Ok();
}

Status Store::GetMetaNumber(std::string_view key, double* value) const {
  Impl::ReadView view(*impl_);
  std::optional<double> stored;
  PLUMB_RETURN_IF_ERROR(impl_->Meta(view.options()).GetDouble(key, &stored));
  if (!stored) return Status::NotFound("meta value '" + std::string(key) + "' is not set");
  *value = *stored;
  return Status::Ok();
}

}  // namespace plumb::store
