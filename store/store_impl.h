// Store::Impl and the helpers shared by the files that implement Store (see the table in
// DEVELOPERS.md). Private to store/: nothing outside includes it. The database itself is
// opened, and its meta values read, through store/db.h.
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
#include "store/db.h"
#include "store/event_id_expiry.h"
#include "store/keys.h"
#include "store/store.h"

namespace plumb::store {

namespace internal {

using ::plumb::NowMs;  // core/clock.h

inline std::string VersionWhat(uint64_t version, std::string_view what) {
  return "version " + std::to_string(version) + " " + std::string(what);
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

  // Declared before `db` so that they outlive it: RocksDB holds raw pointers.
  std::unique_ptr<EventIdExpiry> expiry;
  std::unique_ptr<rocksdb::Env> env;  // null: RocksDB's default (tests give a failing disk)
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

  ~Impl() { internal::CloseDb(db, &handles, primary); }

  // Store::OpenPrimary with the file system of `env` (null: RocksDB's default).
  static Status OpenPrimary(const std::string& dir, const StoreOptions& options,
                            std::unique_ptr<rocksdb::Env> env, std::unique_ptr<Store>* out);

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

  // ---- store.cc: opening and the counters ----
  // Reads last_seq, the log's size, the dictionary sizes and (primary) next_version.
  Status LoadCounters(const rocksdb::ReadOptions& ro);
  // Opens the database as `role` (store/db.h) and takes its handles.
  Status Attach(internal::DbRole role, const internal::DbOpenArgs& args);
  // Typed reads of meta values under `ro`.
  internal::MetaReader Meta(const rocksdb::ReadOptions& ro) const {
    return internal::MetaReader(db, meta, ro);
  }
  // ---- event_log.cc ----
  // Sums the stored bytes of the events in the log (a full scan).
  Status CountLogBytes(const rocksdb::ReadOptions& ro, uint64_t* bytes) const;
  // ---- retention.cc, availability.cc ----
  // The retention totals of meta "plumb.retention" into the retention fields of *totals
  // (all 0 when retention never removed anything). Corruption for an unreadable record.
  Status ReadRetentionTotals(const rocksdb::ReadOptions& ro, LogStats* totals) const;
  // The withdrawn set's generation and size (store/availability.cc); 0 and 0 when never set.
  Status ReadAvailability(const rocksdb::ReadOptions& ro, uint64_t* generation,
                          uint64_t* withdrawn) const;
  // ---- versions.cc ----
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
  Status ReadCanary(const rocksdb::ReadOptions& ro, Canary* out) const;
  // ---- dictionary.cc ----
  // Checks one dictionary extension; `count` is the dictionary size before the change.
  Status CheckNewIds(IdSpace space, uint32_t count,
                     const std::vector<std::pair<uint32_t, std::string>>& entries) const;

  // ---- the steps of Commit (store/commit.cc), all under write_mu ----
  // What a commit will write, worked out before anything is.
  struct CommitPlan {
    uint32_t users_after = 0;
    uint32_t items_after = 0;
    VersionManifest manifest;  // of the published version: numbered and dated
    uint64_t version = 0;      // its number, 0 when none is published
    uint64_t active = 0;       // the active version before and after
    uint64_t new_active = 0;
    Canary canary;      // the canary before the change
    Canary new_canary;  // and after
  };
  // InvalidArgument unless the dictionary extensions, interactions, degrees, cursor, meta
  // keys and the version's shape are consistent with the stored state.
  Status ValidateChange(const StateChange& change, CommitPlan* plan) const;
  // Dates the published version (created_ms 0: now) and gives it its number.
  Status NumberVersion(const StateChange& change, CommitPlan* plan) const;
  // The active version after the change.
  Status ChooseActive(const rocksdb::ReadOptions& ro, const StateChange& change,
                      CommitPlan* plan) const;
  // NotFound for a version not kept, FailedPrecondition naming the damage for an incomplete
  // one: what both Commit's and Activate's activation require.
  Status CheckActivatable(const rocksdb::ReadOptions& ro, uint64_t version) const;
  // Puts the dictionary entries, interactions, degrees, cursor and meta values.
  void PutState(const StateChange& change, rocksdb::WriteBatch* batch) const;
  // Puts the manifest and every block of the published version and the next version number.
  void PutVersion(const CommitPlan& plan, const VersionWrite& write,
                  rocksdb::WriteBatch* batch) const;
  // Deletes the versions the keep rules no longer keep once plan.version is published.
  Status PruneVersions(const rocksdb::ReadOptions& ro, const CommitPlan& plan,
                       rocksdb::WriteBatch* batch) const;
  void PutActive(uint64_t version, rocksdb::WriteBatch* batch) const;
  // The canary after the change (plan->new_canary), checked; after ChooseActive.
  Status ChooseCanary(const rocksdb::ReadOptions& ro, const StateChange& change,
                      CommitPlan* plan) const;
  void PutCanary(const Canary& canary, rocksdb::WriteBatch* batch) const;
};

}  // namespace plumb::store
