#include "store/db.h"

#include <rocksdb/filter_policy.h>
#include <rocksdb/table.h>

#include <algorithm>
#include <charconv>
#include <cmath>
#include <filesystem>

namespace plumb::store::internal {

namespace {

bool IsFullDisk(const rocksdb::Status& s, const std::string& words) {
  return s.IsNoSpace() || (s.IsIOError() && words.find("No space left") != std::string::npos);
}

// RocksDB's POSIX file system words a LOCK file that another process holds as "While lock
// file: <dir>/LOCK: Resource temporarily unavailable", and one this process already holds as
// "lock hold by current process, acquire time ...: <dir>/LOCK: ...".
bool IsHeldLock(const rocksdb::Status& s, const std::string& words) {
  return s.IsIOError() && (words.find("While lock file") != std::string::npos ||
                           words.find("lock hold by current process") != std::string::npos);
}

rocksdb::DBOptions OptionsFor(DbRole role, const DbOpenArgs& args) {
  rocksdb::DBOptions o;
  if (args.env != nullptr) o.env = args.env;
  switch (role) {
    case DbRole::kPrimary:
      o.create_if_missing = args.create_if_missing;
      o.create_missing_column_families = args.create_if_missing;
      o.keep_log_file_num = 5;
      // A secondary (plumb-serve, plumb-load --db) replays every live WAL file into memory
      // when it opens. A family with a small, rarely full memtable (events, meta) keeps old
      // WAL files alive, and with them every version block written since; this bound makes
      // RocksDB flush such families once the WAL passes it. (Found when a store holding one
      // 100k x 64 version plus 200k users took plumb-serve ~20 s to open.)
      o.max_total_wal_size = 256ull << 20;
      // One budget for the memtables of every family together (RocksDB's
      // WriteBufferManager): without it each of the nine families may hold up to two 64 MB
      // memtables, and the trainer's resident memory creeps up by the size of whatever the
      // slow families (ids, interactions, pair_history, meta) have buffered. A full budget
      // flushes the largest.
      o.db_write_buffer_size = 128ull << 20;
      break;
    case DbRole::kSecondary:
      // A secondary must keep every table file open: the primary may delete a file after a
      // compaction, and an open handle keeps it readable until the next catch-up.
      o.max_open_files = -1;
      o.keep_log_file_num = 5;
      break;
    case DbRole::kCheck:
      o.paranoid_checks = true;
      o.max_open_files = -1;  // open every table file now: reads each footer and index
      // An empty directory as the WAL directory: the check is about table files, and
      // reading the log (up to hundreds of MB) would only make it slow.
      o.wal_dir = (std::filesystem::path(args.scratch_dir) / "check-no-wal").string();
      o.db_log_dir = args.scratch_dir;  // never rotate the primary's own LOG file
      o.keep_log_file_num = 2;
      break;
  }
  return o;
}

// The descriptors `role` opens `existing` (the families on disk) with; *present per
// kFamilies family.
Status DescriptorsFor(DbRole role, const DbOpenArgs& args, const std::vector<std::string>& existing,
                      std::vector<rocksdb::ColumnFamilyDescriptor>* out,
                      std::vector<bool>* present) {
  present->clear();
  if (role == DbRole::kCheck) {
    out->clear();
    for (const std::string& name : existing) {
      out->emplace_back(name, rocksdb::ColumnFamilyOptions());
    }
    return Status::Ok();
  }
  *out = FamilyDescriptors(role == DbRole::kPrimary, args.event_id_filter);
  const auto on_disk = [&](const std::string& name) {
    return std::find(existing.begin(), existing.end(), name) != existing.end();
  };
  if (role == DbRole::kPrimary) {
    present->assign(kNumFamilies, true);
    // RocksDB insists on opening every family present; keep any we don't know untouched.
    for (const std::string& name : existing) {
      bool known = false;
      for (const auto& d : *out) known = known || d.name == name;
      if (!known) out->emplace_back(name, rocksdb::ColumnFamilyOptions());
    }
    return Status::Ok();
  }
  // A follower opens only what the primary created.
  std::vector<rocksdb::ColumnFamilyDescriptor> kept;
  kept.push_back(std::move((*out)[0]));
  for (size_t k = 0; k < kNumFamilies; ++k) {
    const bool here = on_disk(kFamilies[k]);
    if (!here && !OptionalOnFollower(kFamilies[k])) {
      return Status::FailedPrecondition("store at " + args.dir + " has no column family " +
                                        kFamilies[k] + "; open it once as the primary");
    }
    present->push_back(here);
    if (here) kept.push_back(std::move((*out)[k + 1]));
  }
  *out = std::move(kept);
  return Status::Ok();
}

}  // namespace

Status FromRocks(const rocksdb::Status& s, const std::string& context) {
  if (s.ok()) return Status::Ok();
  const std::string words = s.ToString();
  std::string msg = context + ": " + words;
  if (IsFullDisk(s, words)) return Status::ResourceExhausted(std::move(msg));
  if (IsHeldLock(s, words)) return Status::Unavailable(std::move(msg));
  if (s.IsNotFound()) return Status::NotFound(std::move(msg));
  if (s.IsCorruption()) return Status::Corruption(std::move(msg));
  if (s.IsInvalidArgument()) return Status::InvalidArgument(std::move(msg));
  if (s.IsBusy() || s.IsTryAgain() || s.IsTimedOut()) return Status::Unavailable(std::move(msg));
  return Status::IoError(std::move(msg));
}

std::vector<rocksdb::ColumnFamilyDescriptor> FamilyDescriptors(
    bool tuned, rocksdb::CompactionFilter* event_id_filter) {
  rocksdb::BlockBasedTableOptions lookup_table;
  lookup_table.filter_policy.reset(rocksdb::NewBloomFilterPolicy(10));
  std::vector<rocksdb::ColumnFamilyDescriptor> out;
  out.emplace_back(rocksdb::kDefaultColumnFamilyName, rocksdb::ColumnFamilyOptions());
  for (const char* name : kFamilies) {
    rocksdb::ColumnFamilyOptions cf;
    const std::string_view n = name;
    if (tuned) {
      if (n == keys::kEventIdsFamily || n == keys::kIdsFamily) {
        // Point lookups of mostly absent keys (new event ids, new external ids).
        cf.table_factory.reset(rocksdb::NewBlockBasedTableFactory(lookup_table));
      }
      if (n == keys::kEventIdsFamily) cf.compaction_filter = event_id_filter;
      // float32 embeddings hardly compress; don't spend CPU on it.
      if (n == keys::kModelsFamily) cf.compression = rocksdb::kNoCompression;
    }
    out.emplace_back(name, cf);
  }
  return out;
}

Status OpenDb(DbRole role, const DbOpenArgs& args, OpenedDb* out, rocksdb::Status* rocks) {
  *out = OpenedDb();
  const rocksdb::DBOptions db_options = OptionsFor(role, args);
  if (role == DbRole::kCheck) {
    std::error_code ec;
    std::filesystem::create_directories(db_options.wal_dir, ec);
    if (ec) return Status::IoError("creating " + db_options.wal_dir + ": " + ec.message());
  }
  std::vector<std::string> existing;
  rocksdb::Status listed = rocksdb::DB::ListColumnFamilies(db_options, args.dir, &existing);
  if (!listed.ok()) {
    if (role == DbRole::kSecondary) {
      return Status::NotFound("no plumb store at " + args.dir + ": " + listed.ToString());
    }
    if (role == DbRole::kCheck) {
      if (rocks != nullptr) *rocks = listed;
      return FromRocks(listed, "checking the files of store " + args.dir);
    }
    existing.clear();  // a new store: the primary creates its families
  }
  std::vector<rocksdb::ColumnFamilyDescriptor> descriptors;
  PLUMB_RETURN_IF_ERROR(DescriptorsFor(role, args, existing, &descriptors, &out->present));

  rocksdb::Status s;
  std::string context = "opening store " + args.dir;
  switch (role) {
    case DbRole::kPrimary:
      s = rocksdb::DB::Open(db_options, args.dir, descriptors, &out->handles, &out->db);
      break;
    case DbRole::kSecondary:
      s = rocksdb::DB::OpenAsSecondary(db_options, args.dir, args.scratch_dir, descriptors,
                                       &out->handles, &out->db);
      context += " as secondary";
      break;
    case DbRole::kCheck:
      s = rocksdb::DB::OpenForReadOnly(db_options, args.dir, descriptors, &out->handles, &out->db);
      context = "checking the files of store " + args.dir;
      break;
  }
  if (rocks != nullptr) *rocks = s;
  if (!s.ok()) {
    CloseDb(out->db, &out->handles, false);
    *out = OpenedDb();
    return FromRocks(s, context);
  }
  return Status::Ok();
}

void CloseDb(rocksdb::DB* db, std::vector<rocksdb::ColumnFamilyHandle*>* handles, bool flush) {
  if (db == nullptr) return;
  if (flush) {
    // Leave the data in table files, not only in the WAL, so that the next opening (a
    // secondary above all) does not replay it. Best effort: the WAL is durable either way.
    rocksdb::FlushOptions options;
    options.wait = true;
    (void)db->Flush(options, *handles);
  }
  for (auto* h : *handles) db->DestroyColumnFamilyHandle(h);
  handles->clear();
  db->Close();
  delete db;
}

// ---- meta -------------------------------------------------------------------------------

Status MetaReader::GetString(std::string_view key, std::optional<std::string>* value) const {
  value->reset();
  std::string raw;
  rocksdb::Status s = db_->Get(ro_, meta_, AsSlice(key), &raw);
  if (s.IsNotFound()) return Status::Ok();
  PLUMB_RETURN_IF_ERROR(FromRocks(s, "meta value '" + std::string(key) + "'"));
  *value = std::move(raw);
  return Status::Ok();
}

namespace {

// Reads meta `key` and parses its bytes; Corruption "meta value '<key>' holds <describe(bytes)>"
// when parse gives nullopt.
template <typename T, typename Parse, typename Describe>
Status ReadParsed(const MetaReader& meta, std::string_view key, std::optional<T>* value,
                  Parse parse, Describe describe) {
  value->reset();
  std::optional<std::string> raw;
  PLUMB_RETURN_IF_ERROR(meta.GetString(key, &raw));
  if (!raw) return Status::Ok();
  *value = parse(*raw);
  if (*value) return Status::Ok();
  return Status::Corruption("meta value '" + std::string(key) + "' holds " + describe(*raw));
}

}  // namespace

Status MetaReader::GetU64(std::string_view key, std::optional<uint64_t>* value) const {
  return ReadParsed(
      *this, key, value, [](const std::string& raw) { return keys::ParseFixed64(raw); },
      [](const std::string& raw) {
        return std::to_string(raw.size()) + " bytes, not an 8-byte number";
      });
}

Status MetaReader::GetDouble(std::string_view key, std::optional<double>* value) const {
  return ReadParsed(*this, key, value, ParseDecimal, [](const std::string& raw) {
    // Stored bytes may be anything: show a short, printable prefix.
    std::string shown;
    for (char c : raw.substr(0, 32)) shown += (c >= 0x20 && c < 0x7f) ? c : '?';
    return "'" + shown + "', not a number";
  });
}

std::optional<double> ParseDecimal(std::string_view text) {
  double v = 0.0;
  const char* end = text.data() + text.size();
  auto [ptr, ec] = std::from_chars(text.data(), end, v);
  if (text.empty() || ec != std::errc() || ptr != end || !std::isfinite(v)) return std::nullopt;
  return v;
}

}  // namespace plumb::store::internal
