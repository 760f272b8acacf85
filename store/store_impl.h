// Store::Impl and the helpers shared by the files that implement Store (store.cc,
// integrity.cc, repair.cc, forget.cc). Private to store/: nothing outside includes it.
#pragma once

#include <rocksdb/db.h>
#include <rocksdb/options.h>
#include <rocksdb/slice.h>
#include <rocksdb/snapshot.h>
#include <rocksdb/write_batch.h>

#include <atomic>
#include <chrono>
#include <cstring>
#include <functional>
#include <memory>
#include <mutex>
#include <optional>
#include <set>
#include <shared_mutex>
#include <string>
#include <string_view>
#include <vector>

#include "core/clock.h"
#include "store/event_id_expiry.h"
#include "store/keys.h"
#include "store/store.h"

namespace plumb::store {

namespace internal {

using ::plumb::NowMs;  // core/clock.h

inline rocksdb::Slice AsSlice(std::string_view s) { return rocksdb::Slice(s.data(), s.size()); }
inline std::string_view AsView(const rocksdb::Slice& s) {
  return std::string_view(s.data(), s.size());
}

inline bool StartsWith(const rocksdb::Slice& key, std::string_view prefix) {
  return key.size() >= prefix.size() && std::memcmp(key.data(), prefix.data(), prefix.size()) == 0;
}

// Translates a RocksDB status; `context` says what the store was doing.
inline Status FromRocks(const rocksdb::Status& s, const std::string& context) {
  if (s.ok()) return Status::Ok();
  std::string msg = context + ": " + s.ToString();
  if (s.IsNotFound()) return Status::NotFound(std::move(msg));
  if (s.IsCorruption()) return Status::Corruption(std::move(msg));
  if (s.IsInvalidArgument()) return Status::InvalidArgument(std::move(msg));
  if (s.IsBusy() || s.IsTryAgain() || s.IsTimedOut()) return Status::Unavailable(std::move(msg));
  return Status::IoError(std::move(msg));
}

inline std::string VersionWhat(uint64_t version, std::string_view what) {
  return "version " + std::to_string(version) + " " + std::string(what);
}

inline constexpr const char* kFamilies[] = {
    keys::kEventsFamily,  keys::kEventIdsFamily, keys::kIdsFamily,  keys::kInteractionsFamily,
    keys::kDegreesFamily, keys::kModelsFamily,   keys::kMetaFamily, keys::kPairHistoryFamily,
};
inline constexpr size_t kNumFamilies = sizeof(kFamilies) / sizeof(kFamilies[0]);
// Families added after stores existed: a follower opens them when the primary has created
// them and does without otherwise (their handle stays null).
inline bool OptionalOnFollower(std::string_view family) {
  return family == keys::kPairHistoryFamily;
}

// The stored size of one event: its key and its encoded value.
inline uint64_t StoredEventBytes(size_t value_bytes) { return 8 + value_bytes; }

inline uint64_t BlockCount(uint64_t rows, uint32_t rows_per_block) {
  return rows == 0 ? 0 : (rows + rows_per_block - 1) / rows_per_block;
}

// Describes the store files in `dir` when it has no CURRENT file ("3 table file(s), ..."),
// or returns "" when it has CURRENT or no store files (integrity.cc).
std::string StoreFilesWithoutCurrent(const std::string& dir);
// The sentence that follows every report of damage: where to look and how to recover.
std::string DamageAdvice(const std::string& dir);
// A key of a column family in words ("version 2 items block 3", "event 17").
std::string DescribeKey(std::string_view family, std::string_view key);
// After an iterator from make_iterator() failed past `last_good` (a damaged block), finds
// the first readable key beyond the damage by a search over Seek targets. Empty with
// *at_end when nothing readable follows.
std::string SkipDamagedBlock(const std::function<rocksdb::Iterator*()>& make_iterator,
                             std::string_view last_good, bool* at_end);

}  // namespace internal

struct Store::Impl {
  bool primary = false;
  StoreOptions options;
  std::string dir;
  std::string scratch_dir;  // secondary only

  // Declared before `db` so that it outlives it: RocksDB holds a raw pointer.
  std::unique_ptr<EventIdExpiry> expiry;
  rocksdb::DB* db = nullptr;
  std::vector<rocksdb::ColumnFamilyHandle*> handles;  // owned, released before `db`
  rocksdb::ColumnFamilyHandle* events = nullptr;
  rocksdb::ColumnFamilyHandle* event_ids = nullptr;
  rocksdb::ColumnFamilyHandle* ids = nullptr;
  rocksdb::ColumnFamilyHandle* interactions = nullptr;
  rocksdb::ColumnFamilyHandle* degrees = nullptr;
  rocksdb::ColumnFamilyHandle* models = nullptr;
  rocksdb::ColumnFamilyHandle* meta = nullptr;
  rocksdb::ColumnFamilyHandle* pair_history = nullptr;  // null on a follower of an older store

  // Reads hold it shared; a secondary's CatchUp() holds it exclusively, so that no read
  // sees half of a catch-up. On the primary, snapshots give each read one consistent view.
  mutable std::shared_mutex view_mu;
  // Serialises writers on the primary; the caches below change only under it.
  std::mutex write_mu;

  // Primary: exact (this process is the only writer). Secondary: as of the last catch-up.
  std::atomic<uint64_t> last_seq{0};
  std::atomic<uint32_t> user_count{0};
  std::atomic<uint32_t> item_count{0};
  uint64_t next_version = 1;  // primary only, under write_mu
  // Stored bytes of every event ever appended (meta kMetaLogBytes); log_bytes_known is false
  // on a follower of a store whose primary never recorded it (GetLogStats then counts).
  std::atomic<uint64_t> log_bytes_appended{0};
  std::atomic<bool> log_bytes_known{true};
  // One retention pass at a time (store/retention.cc).
  std::mutex retention_mu;
  // Serialises changes of the withdrawn set (store/availability.cc).
  std::mutex availability_mu;

  ~Impl() {
    if (db == nullptr) return;
    if (primary) {
      // Leave the data in table files, not only in the WAL, so that the next opening (a
      // secondary above all) does not replay it. Best effort: the WAL is durable either way.
      rocksdb::FlushOptions flush;
      flush.wait = true;
      (void)db->Flush(flush, handles);
    }
    for (auto* h : handles) db->DestroyColumnFamilyHandle(h);
    db->Close();
    delete db;
  }

  std::atomic<uint32_t>& Count(IdSpace space) {
    return space == IdSpace::kUser ? user_count : item_count;
  }
  const std::atomic<uint32_t>& Count(IdSpace space) const {
    return space == IdSpace::kUser ? user_count : item_count;
  }

  rocksdb::WriteOptions WriteOpts() const {
    rocksdb::WriteOptions w;
    w.sync = options.sync;
    return w;
  }

  // Every write goes through here. A write that meets a full disk leaves RocksDB refusing
  // writes until its own recovery finds a memtable's worth of space free, and a background
  // sync of the failed log can trip an assertion of the Debian build (abort). So a write
  // that would cut into options.min_free_disk_bytes is refused before RocksDB sees it.
  Status Write(rocksdb::WriteBatch* batch, const std::string& what) {
    PLUMB_RETURN_IF_ERROR(CheckFreeSpace(batch->GetDataSize(), what));
    return internal::FromRocks(db->Write(WriteOpts(), batch), what);
  }
  // ResourceExhausted when writing `bytes` would leave less than min_free_disk_bytes free
  // on the store's file system (store.cc).
  Status CheckFreeSpace(uint64_t bytes, const std::string& what) const;

  Status RequirePrimary(std::string_view what) const {
    if (primary) return Status::Ok();
    return Status::FailedPrecondition(std::string(what) +
                                      ": the store is open as a read-only secondary");
  }

  // Reads one value; NotFound passes through as a NotFound Status.
  Status Get(const rocksdb::ReadOptions& ro, rocksdb::ColumnFamilyHandle* cf, std::string_view key,
             std::string* value, const std::string& what) const {
    return internal::FromRocks(db->Get(ro, cf, internal::AsSlice(key), value), what);
  }

  // One consistent read: the catch-up lock held shared and, on the primary, a snapshot.
  class ReadView {
   public:
    explicit ReadView(const Impl& impl) : lock_(impl.view_mu) {
      if (impl.primary) {
        snapshot_.emplace(impl.db);
        options_.snapshot = snapshot_->snapshot();
      }
    }
    const rocksdb::ReadOptions& options() const { return options_; }

   private:
    std::shared_lock<std::shared_mutex> lock_;
    std::optional<rocksdb::ManagedSnapshot> snapshot_;
    rocksdb::ReadOptions options_;
  };

  Status LoadCounters(const rocksdb::ReadOptions& ro);
  // Sums the stored bytes of the events in the log (a full scan).
  Status CountLogBytes(const rocksdb::ReadOptions& ro, uint64_t* bytes) const;
  // The retention totals of meta "plumb.retention" into the retention fields of *totals
  // (all 0 when retention never removed anything). Corruption for an unreadable record.
  Status ReadRetentionTotals(const rocksdb::ReadOptions& ro, LogStats* totals) const;
  // The withdrawn set's generation and size (store/availability.cc); 0 and 0 when never set.
  Status ReadAvailability(const rocksdb::ReadOptions& ro, uint64_t* generation,
                          uint64_t* withdrawn) const;
  // Assigns the handles of the families in kFamilies order (handles[0] is RocksDB's default);
  // `present` says which exist (a follower may lack the optional ones).
  void AssignHandles(const std::vector<bool>& present);
  Status ReadManifestLocked(const rocksdb::ReadOptions& ro, uint64_t version, VersionManifest* out,
                            uint32_t* rows_per_block) const;
  // Reads the blocks of one array of a version into dest (may be null: only check them).
  Status ReadBlocks(const rocksdb::ReadOptions& ro, uint64_t version, std::string_view what,
                    const std::function<std::string(uint32_t)>& key_of, uint64_t rows,
                    uint64_t row_bytes, uint32_t rows_per_block, char* dest) const;
  Status CheckComplete(const rocksdb::ReadOptions& ro, uint64_t version) const;
  Status ListVersionNumbers(const rocksdb::ReadOptions& ro, std::vector<uint64_t>* out) const;
  Status ActiveVersion(const rocksdb::ReadOptions& ro, uint64_t* version) const;
  Status DeleteVersion(const rocksdb::ReadOptions& ro, uint64_t version,
                       rocksdb::WriteBatch* batch) const;
  Status PinnedVersions(const rocksdb::ReadOptions& ro, std::set<uint64_t>* out) const;
  Status CheckNewIds(IdSpace space, uint32_t count,
                     const std::vector<std::pair<uint32_t, std::string>>& entries) const;
};

}  // namespace plumb::store
