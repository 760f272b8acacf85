// Store::Repair: from a damaged store back to one that plumb-train and plumb-serve open,
// keeping every record that can still be read.
#include <rocksdb/metadata.h>
#include <rocksdb/sst_file_reader.h>
#include <rocksdb/table_properties.h>

#include <algorithm>
#include <filesystem>
#include <map>
#include <set>

#include "store/keys.h"
#include "store/store_impl.h"

namespace plumb::store {

using namespace internal;

namespace {

namespace fs = std::filesystem;

std::set<std::string> LostFiles(const std::string& dir) {
  std::set<std::string> out;
  std::error_code ec;
  for (const auto& e : fs::directory_iterator(fs::path(dir) / "lost", ec)) {
    out.insert(e.path().filename().string());
  }
  return out;
}

// Table files whose blocks do not all pass their checksums, with the reason.
Status DamagedTables(const std::string& dir, std::map<std::string, std::string>* damaged) {
  std::error_code ec;
  for (const auto& e : fs::directory_iterator(dir, ec)) {
    const std::string ext = e.path().extension().string();
    if (ext != ".sst" && ext != ".ldb") continue;
    rocksdb::SstFileReader reader{rocksdb::Options()};
    rocksdb::Status s = reader.Open(e.path().string());
    if (s.ok()) s = reader.VerifyChecksum();
    if (!s.ok()) (*damaged)[e.path().filename().string()] = s.ToString();
  }
  if (ec) return Status::IoError("listing " + dir + ": " + ec.message());
  return Status::Ok();
}

// The families whose records are written once and never changed in place, so that a copy
// read back from a set-aside table file is the current value whenever the key is absent.
// meta and degrees are overwritten; repair recomputes what it needs of them instead.
bool Salvageable(std::string_view family) {
  return family == keys::kEventsFamily || family == keys::kEventIdsFamily ||
         family == keys::kIdsFamily || family == keys::kInteractionsFamily ||
         family == keys::kModelsFamily || family == keys::kPairHistoryFamily;
}

// Repair needs the store to itself.
Status InUse(const std::string& dir, const Status& why) {
  return Status::Unavailable(dir + " is in use by another process (stop plumb-train before " +
                             "repairing): " + why.message());
}

}  // namespace

Status Store::Repair(const std::string& dir, const StoreOptions& options, RepairReport* report) {
  *report = RepairReport();
  RepairReport& r = *report;
  std::error_code ec;
  if (!fs::is_directory(dir, ec)) return Status::NotFound("no store at " + dir);

  // ---- 1. Does RocksDB's own repair have to rebuild the file set? ------------------------
  const std::string scratch = (fs::path(dir) / "lost" / "repair-scratch").string();
  std::string why;
  if (std::string files = StoreFilesWithoutCurrent(dir); !files.empty()) {
    why = "no CURRENT file (" + files + ")";
  } else if (!fs::exists(fs::path(dir) / "CURRENT", ec)) {
    return Status::NotFound("no store at " + dir);
  } else if (Status s = CheckFiles(dir, scratch); !s.ok()) {
    if (!s.IsCorruption()) return s;
    why = s.message().substr(0, s.message().find(" `plumb inspect"));
  }
  std::map<std::string, std::string> damaged;
  PLUMB_RETURN_IF_ERROR(DamagedTables(dir, &damaged));
  if (why.empty() && !damaged.empty()) {
    why = std::to_string(damaged.size()) + " table file(s) with blocks that fail their checksums";
  }

  if (!why.empty()) {
    r.rebuilt = true;
    r.rebuild_reason = why;
    const std::set<std::string> lost_before = LostFiles(dir);
    rocksdb::DBOptions db_options;
    db_options.paranoid_checks = true;
    db_options.db_log_dir = scratch;
    const std::vector<rocksdb::ColumnFamilyDescriptor> descriptors =
        FamilyDescriptors(/*tuned=*/false, nullptr);
    // RocksDB's repair: reads every table file (setting aside into <dir>/lost/ each one that
    // cannot be read in full), turns the write-ahead logs into table files, and writes a
    // new MANIFEST naming what is left. It takes the store's lock: it fails while
    // plumb-train (or a plumb command) has the store open.
    Status s =
        FromRocks(rocksdb::RepairDB(dir, db_options, descriptors, rocksdb::ColumnFamilyOptions()),
                  "RocksDB repair of " + dir);
    if (s.code() == Status::Code::kUnavailable) return InUse(dir, s);
    PLUMB_RETURN_IF_ERROR(s);
    for (const std::string& name : LostFiles(dir)) {
      if (lost_before.count(name) != 0) continue;
      const fs::path path = fs::path(dir) / "lost" / name;
      if (path.extension() != ".sst" && path.extension() != ".ldb") continue;
      RepairReport::SetAside aside;
      aside.file = name;
      auto found = damaged.find(name);
      aside.why = found != damaged.end() ? found->second : "unreadable";
      rocksdb::SstFileReader reader{rocksdb::Options()};
      if (reader.Open(path.string()).ok()) {
        if (auto props = reader.GetTableProperties()) aside.family = props->column_family_name;
      }
      r.set_aside.push_back(std::move(aside));
    }
  }

  // ---- 2. Open as the primary and copy back what the set-aside files still hold. -----------
  // CURRENT exists by now. create_if_missing also creates the column families RocksDB's
  // repair leaves out (it restores only those that have table files).
  StoreOptions open_options = options;
  open_options.create_if_missing = true;
  std::unique_ptr<Store> store;
  Status opened = OpenPrimary(dir, open_options, &store);
  if (opened.code() == Status::Code::kUnavailable) return InUse(dir, opened);
  PLUMB_RETURN_IF_ERROR(opened);
  Impl& d = *store->impl_;
  std::lock_guard write_lock(d.write_mu);
  const rocksdb::ReadOptions ro;
  // Events that retention folded into pair_history stay removed: copying them back would
  // count them twice.
  LogStats retained;
  if (!d.ReadRetentionTotals(ro, &retained).ok()) retained = LogStats();

  for (RepairReport::SetAside& aside : r.set_aside) {
    if (!Salvageable(aside.family)) continue;
    rocksdb::ColumnFamilyHandle* cf = nullptr;
    for (size_t k = 0; k < kNumFamilies; ++k) {
      if (aside.family == kFamilies[k]) cf = d.handles[k + 1];
    }
    if (cf == nullptr) continue;
    rocksdb::SstFileReader reader{rocksdb::Options()};
    if (!reader.Open((fs::path(dir) / "lost" / aside.file).string()).ok()) continue;
    auto make = [&] { return reader.NewIterator(rocksdb::ReadOptions()); };
    std::unique_ptr<rocksdb::Iterator> it(make());
    std::string last_good, value;
    rocksdb::WriteBatch batch;
    it->SeekToFirst();
    while (true) {
      for (; it->Valid(); it->Next()) {
        last_good = it->key().ToString();
        if (cf == d.events) {
          auto seq = keys::ParseEventKey(AsView(it->key()));
          if (seq && *seq <= retained.folded_through) continue;
        }
        rocksdb::Status g = d.db->Get(ro, cf, it->key(), &value);
        if (g.IsNotFound()) {
          batch.Put(cf, it->key(), it->value());
          ++aside.salvaged;
        }
      }
      if (it->status().ok()) break;
      ++aside.unreadable_ranges;
      bool at_end = false;
      const std::string next = SkipDamagedBlock(make, last_good, &at_end);
      if (at_end) break;
      it.reset(make());
      it->Seek(rocksdb::Slice(next));
    }
    if (batch.Count() > 0) {
      PLUMB_RETURN_IF_ERROR(d.Write(&batch, "copying back records of " + aside.file));
    }
    r.salvaged_records += aside.salvaged;
  }
  PLUMB_RETURN_IF_ERROR(d.LoadCounters(ro));

  // ---- 3. Versions: keep the complete ones, make a complete one active. -------------------
  std::string raw;
  if (d.ActiveVersion(ro, &r.active_before).IsCorruption()) r.active_before = 0;
  std::vector<uint64_t> versions;
  PLUMB_RETURN_IF_ERROR(d.ListVersionNumbers(ro, &versions));
  std::vector<uint64_t> complete;
  rocksdb::WriteBatch fixes;
  for (uint64_t v : versions) {
    if (d.CheckComplete(ro, v).ok()) {
      complete.push_back(v);
    } else {
      PLUMB_RETURN_IF_ERROR(d.DeleteVersion(ro, v, &fixes));
      r.dropped_versions.push_back(v);
    }
  }
  r.active_after = r.active_before;
  if (std::find(complete.begin(), complete.end(), r.active_before) == complete.end()) {
    // The newest complete version that did not fail its gate; else none.
    r.active_after = 0;
    for (auto v = complete.rbegin(); v != complete.rend(); ++v) {
      VersionManifest m;
      uint32_t rpb = 0;
      if (d.ReadManifestLocked(ro, *v, &m, &rpb).ok() && m.gate != GateOutcome::kFailed) {
        r.active_after = *v;
        break;
      }
    }
    fixes.Put(d.meta, AsSlice(keys::kMetaActiveVersion), AsSlice(keys::Fixed64(r.active_after)));
  }
  {
    // A canary whose version was dropped, made active, or that cannot be read ends.
    Canary canary;
    const bool unreadable = !d.ReadCanary(ro, &canary).ok();
    const bool kept = std::find(complete.begin(), complete.end(), canary.version) != complete.end();
    if (unreadable || (canary.version != 0 && (!kept || canary.version == r.active_after))) {
      d.PutCanary(Canary{}, &fixes);
    }
  }
  uint64_t next = d.next_version;
  if (!r.dropped_versions.empty()) next = std::max(next, r.dropped_versions.back() + 1);
  fixes.Put(d.meta, AsSlice(keys::kMetaNextVersion), AsSlice(keys::Fixed64(next)));

  // ---- 4. The cursor within the log, the live degrees from the interactions. --------------
  {
    std::optional<uint64_t> parsed;
    const bool unreadable = d.Meta(ro).GetU64(keys::kMetaCursor, &parsed).IsCorruption();
    r.cursor_before = parsed.value_or(0);
    r.cursor_after = std::min<uint64_t>(r.cursor_before, d.last_seq.load());
    if (r.cursor_after != r.cursor_before || unreadable) {
      fixes.Put(d.meta, AsSlice(keys::kMetaCursor), AsSlice(keys::Fixed64(r.cursor_after)));
    }
  }
  {
    std::vector<uint32_t> counted(d.item_count.load(), 0);
    std::unique_ptr<rocksdb::Iterator> it(d.db->NewIterator(ro, d.interactions));
    for (it->SeekToFirst(); it->Valid(); it->Next()) {
      if (it->key().size() != 8) continue;
      const uint32_t item = keys::ReadBigEndian32(it->key().data() + 4);
      if (item < counted.size()) ++counted[item];
    }
    PLUMB_RETURN_IF_ERROR(FromRocks(it->status(), "counting interactions"));
    std::vector<uint32_t> stored(counted.size(), 0);
    std::unique_ptr<rocksdb::Iterator> dt(d.db->NewIterator(ro, d.degrees));
    for (dt->SeekToFirst(); dt->Valid(); dt->Next()) {
      auto degree = keys::ParseFixed32(AsView(dt->value()));
      const uint32_t item =
          dt->key().size() == 4 ? keys::ReadBigEndian32(dt->key().data()) : UINT32_MAX;
      if (item < stored.size() && degree) {
        stored[item] = *degree;
      } else {
        fixes.Delete(d.degrees, dt->key());
        ++r.degrees_rewritten;
      }
    }
    PLUMB_RETURN_IF_ERROR(FromRocks(dt->status(), "reading degrees"));
    for (uint32_t item = 0; item < counted.size(); ++item) {
      if (stored[item] == counted[item]) continue;
      fixes.Put(d.degrees, AsSlice(keys::DegreeKey(item)), AsSlice(keys::Fixed32(counted[item])));
      ++r.degrees_rewritten;
    }
  }
  PLUMB_RETURN_IF_ERROR(d.Write(&fixes, "writing the repair"));
  d.next_version = next;

  // ---- 5. What is still wrong. --------------------------------------------------------
  VerifyReport after;
  PLUMB_RETURN_IF_ERROR(store->Verify(&after));
  r.remaining = std::move(after.problems);
  return Status::Ok();
}

}  // namespace plumb::store
