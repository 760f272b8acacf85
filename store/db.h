// The RocksDB database under a Store: opened by role with plumb's column families written
// down once, RocksDB statuses translated into plumb's, and typed reads of meta values.
// Private to store/: nothing outside includes it.
#pragma once

#include <rocksdb/compaction_filter.h>
#include <rocksdb/db.h>
#include <rocksdb/env.h>
#include <rocksdb/options.h>
#include <rocksdb/slice.h>

#include <cstdint>
#include <cstring>
#include <optional>
#include <string>
#include <string_view>
#include <vector>

#include "core/status.h"
#include "store/keys.h"

namespace plumb::store::internal {

inline rocksdb::Slice AsSlice(std::string_view s) { return rocksdb::Slice(s.data(), s.size()); }
inline std::string_view AsView(const rocksdb::Slice& s) {
  return std::string_view(s.data(), s.size());
}

inline bool StartsWith(const rocksdb::Slice& key, std::string_view prefix) {
  return key.size() >= prefix.size() && std::memcmp(key.data(), prefix.data(), prefix.size()) == 0;
}

// Translates a RocksDB status; `context` says what the store was doing. The message is
// "<context>: <RocksDB's words>". Codes:
//   a full disk (IOError with the NoSpace subcode, or "No space left" in its words)
//                                          -> ResourceExhausted
//   the directory's LOCK file held by another process or another open in this one
//                                          -> Unavailable
//   Busy, TryAgain, TimedOut               -> Unavailable
//   NotFound, Corruption, InvalidArgument  -> the same
//   anything else                          -> IoError
Status FromRocks(const rocksdb::Status& s, const std::string& context);

// The column families plumb creates, in the order of Store::Impl's handles.
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

// RocksDB's default family followed by every family of kFamilies. `tuned`: with the options
// the primary writes them with (bloom filters for the point lookups of event_ids and ids,
// `event_id_filter` as the compaction filter of event_ids, no compression of models);
// otherwise RocksDB's defaults (a follower's reads, RocksDB's repair).
std::vector<rocksdb::ColumnFamilyDescriptor> FamilyDescriptors(
    bool tuned, rocksdb::CompactionFilter* event_id_filter);

// How a Store (or a check of its files) opens the database.
enum class DbRole {
  // The one writer: every family of kFamilies (created when missing with
  // create_if_missing), plus any family on disk that plumb does not know, left untouched.
  kPrimary,
  // A follower (RocksDB secondary) with its own scratch directory: every family of
  // kFamilies; an OptionalOnFollower family may be absent. NotFound without a store,
  // FailedPrecondition when a required family is missing.
  kSecondary,
  // Read-only with paranoid checks, every family on disk and every table file opened (which
  // reads each footer and index); the write-ahead log is not read (an empty directory under
  // the scratch directory stands in for it).
  kCheck,
};

struct DbOpenArgs {
  std::string dir;
  std::string scratch_dir;         // kSecondary, kCheck: RocksDB's info log goes here
  bool create_if_missing = false;  // kPrimary
  rocksdb::CompactionFilter* event_id_filter = nullptr;  // kPrimary; must outlive the db
  rocksdb::Env* env = nullptr;  // null: the default; tests give a failing disk. Must outlive the db
};

struct OpenedDb {
  rocksdb::DB* db = nullptr;
  // [0] is RocksDB's default family, then the families opened in kFamilies order (kCheck:
  // in the order RocksDB lists them), then (kPrimary) the unknown ones.
  std::vector<rocksdb::ColumnFamilyHandle*> handles;
  // One entry per kFamilies family: whether it was opened (empty for kCheck).
  std::vector<bool> present;
};

// Opens the database in args.dir as `role`. On success the caller owns *out (CloseDb); on
// failure nothing stays open. *rocks, when given, receives RocksDB's own status of the
// failed call (CheckFiles rewords it).
Status OpenDb(DbRole role, const DbOpenArgs& args, OpenedDb* out, rocksdb::Status* rocks = nullptr);

// Releases the handles and closes the database; `flush` first writes the memtables into
// table files (best effort).
void CloseDb(rocksdb::DB* db, std::vector<rocksdb::ColumnFamilyHandle*>* handles, bool flush);

// Typed reads of the meta family. Each gives OK and nullopt when the key is unset, and a
// Corruption naming the key when the stored bytes cannot be what the store (or a caller of
// StateChange::meta) wrote: "meta value 'plumb.cursor' holds 3 bytes, not an 8-byte number".
// Never throws on stored bytes.
class MetaReader {
 public:
  MetaReader(rocksdb::DB* db, rocksdb::ColumnFamilyHandle* meta, const rocksdb::ReadOptions& ro)
      : db_(db), meta_(meta), ro_(ro) {}

  Status GetString(std::string_view key, std::optional<std::string>* value) const;
  // A little-endian Fixed64 (keys::Fixed64).
  Status GetU64(std::string_view key, std::optional<uint64_t>* value) const;
  // Decimal text of a finite number, the whole value (e.g. "0.2").
  Status GetDouble(std::string_view key, std::optional<double>* value) const;

 private:
  rocksdb::DB* db_;
  rocksdb::ColumnFamilyHandle* meta_;
  rocksdb::ReadOptions ro_;
};

// The number in `text` as GetDouble reads it; nullopt unless all of it is one finite number.
std::optional<double> ParseDecimal(std::string_view text);

}  // namespace plumb::store::internal
