// Store::CheckFiles and Store::Verify: finding damage instead of serving around it.
#include <rocksdb/metadata.h>
#include <rocksdb/sst_file_reader.h>

#include <algorithm>
#include <filesystem>
#include <fstream>
#include <sstream>
#include <thread>

#include "store/keys.h"
#include "store/records.h"
#include "store/store_impl.h"

namespace plumb::store {

using namespace internal;

namespace {

namespace fs = std::filesystem;

// CURRENT's content and the size of the MANIFEST it names: changes whenever the primary
// changes the set of live files.
std::string ManifestState(const std::string& dir) {
  std::ifstream in(fs::path(dir) / "CURRENT");
  std::string manifest;
  std::getline(in, manifest);
  std::error_code ec;
  const auto size = fs::file_size(fs::path(dir) / manifest, ec);
  return manifest + ":" + (ec ? std::string("?") : std::to_string(size));
}

}  // namespace

std::string internal::StoreFilesWithoutCurrent(const std::string& dir) {
  std::error_code ec;
  if (!fs::is_directory(dir, ec) || fs::exists(fs::path(dir) / "CURRENT", ec)) return {};
  size_t tables = 0, logs = 0, manifests = 0, others = 0;
  for (const auto& entry : fs::directory_iterator(dir, ec)) {
    if (!entry.is_regular_file(ec)) continue;
    const std::string name = entry.path().filename().string();
    const std::string ext = entry.path().extension().string();
    if (ext == ".sst" || ext == ".ldb" || ext == ".blob") {
      ++tables;
    } else if (ext == ".log") {
      ++logs;
    } else if (name.starts_with("MANIFEST-")) {
      ++manifests;
    } else if (name == "IDENTITY" || name.starts_with("OPTIONS-")) {
      ++others;
    }
  }
  if (tables + logs + manifests + others == 0) return {};
  std::ostringstream what;
  what << tables << " table file(s), " << logs << " log file(s), " << manifests
       << " MANIFEST file(s)";
  return what.str();
}

std::string internal::DamageAdvice(const std::string& dir) {
  return " `plumb inspect --verify --db " + dir + "` lists all damage; `plumb repair --db " + dir +
         "` recovers what can be read (README: operations).";
}

Status Store::CheckFiles(const std::string& dir, const std::string& scratch_dir) {
  std::error_code ec;
  if (!fs::exists(fs::path(dir) / "CURRENT", ec)) {
    const std::string files = StoreFilesWithoutCurrent(dir);
    if (!files.empty()) {
      return Status::Corruption("store at " + dir + " is damaged: it holds " + files +
                                " but no CURRENT file." + DamageAdvice(dir));
    }
    return Status::NotFound("no plumb store at " + dir);
  }
  DbOpenArgs args;
  args.dir = dir;
  args.scratch_dir = scratch_dir;
  for (int attempt = 0;; ++attempt) {
    const std::string before = ManifestState(dir);
    OpenedDb opened;
    rocksdb::Status s;
    Status checked = OpenDb(DbRole::kCheck, args, &opened, &s);
    if (checked.ok()) {
      CloseDb(opened.db, &opened.handles, false);
      return Status::Ok();
    }
    if (s.ok()) return checked;  // failed before RocksDB was asked
    if (attempt < 4 && ManifestState(dir) != before) {
      // The primary changed the live files while we looked; look again.
      std::this_thread::sleep_for(std::chrono::milliseconds(20 << attempt));
      continue;
    }
    std::string what = s.ToString();
    // RocksDB looks for a missing table file under its old extension too and names that one;
    // name the file the store actually lost.
    for (size_t at = what.find(".ldb: No such file"); at != std::string::npos;
         at = what.find(".ldb: No such file", at + 1)) {
      what.replace(at, 4, ".sst");
    }
    while (what.starts_with("Corruption: Corruption: ")) what.erase(0, 12);
    if (s.IsCorruption() || what.find("No such file") != std::string::npos) {
      return Status::Corruption("store at " + dir + " is damaged: " + what + "." +
                                DamageAdvice(dir));
    }
    return Status::IoError("checking the files of store " + dir + ": " + what);
  }
}

Status Store::RecheckFiles() const {
  if (impl_->primary) return Status::Ok();
  return CheckFiles(impl_->dir, impl_->scratch_dir);
}

// ---- Verify -----------------------------------------------------------------------------

namespace {

using U128 = unsigned __int128;

// The first 16 bytes of a key as a big-endian number (shorter keys padded with zeros):
// bytewise key order is numeric order, which lets a search step over a damaged block.
U128 KeyNumber(std::string_view key) {
  U128 x = 0;
  for (size_t i = 0; i < 16; ++i) {
    x = (x << 8) | (i < key.size() ? static_cast<unsigned char>(key[i]) : 0u);
  }
  return x;
}

std::string NumberKey(U128 x) {
  std::string key(16, '\0');
  for (int i = 15; i >= 0; --i) {
    key[static_cast<size_t>(i)] = static_cast<char>(x & 0xff);
    x >>= 8;
  }
  return key;
}

}  // namespace

std::string internal::DescribeKey(std::string_view family, std::string_view key) {
  auto big64 = [&](size_t at) { return keys::ReadBigEndian64(key.data() + at); };
  auto big32 = [&](size_t at) { return keys::ReadBigEndian32(key.data() + at); };
  if (family == keys::kEventsFamily && key.size() == 8) return "event " + std::to_string(big64(0));
  if (family == keys::kInteractionsFamily && key.size() == 8) {
    return "interaction (user " + std::to_string(big32(0)) + ", item " + std::to_string(big32(4)) +
           ")";
  }
  if (family == keys::kDegreesFamily && key.size() == 4) {
    return "degree of item " + std::to_string(big32(0));
  }
  if (family == keys::kModelsFamily && !key.empty()) {
    if (key[0] == 'm' && key.size() == 9)
      return "version " + std::to_string(big64(1)) + " manifest";
    if (key[0] == 'b' && key.size() == 14) {
      return "version " + std::to_string(big64(1)) + " " +
             std::string(keys::MatrixName(static_cast<MatrixKind>(key[9]))) + " block " +
             std::to_string(big32(10));
    }
    if (key[0] == 'd' && key.size() == 13) {
      return "version " + std::to_string(big64(1)) + " degree block " + std::to_string(big32(9));
    }
  }
  if (family == keys::kIdsFamily && key.size() >= 2) {
    const std::string space = key[0] == 'u' ? "user" : "item";
    if (key[1] == 'n' && key.size() == 6) return space + " index " + std::to_string(big32(2));
    if (key[1] == 'x') return space + " id entry";
  }
  if (family == keys::kMetaFamily) return "meta value '" + std::string(key) + "'";
  if (family == keys::kEventIdsFamily) return "event id record";
  std::string hex;
  static const char kDigits[] = "0123456789abcdef";
  for (unsigned char c : key.substr(0, 24)) {
    hex += kDigits[c >> 4];
    hex += kDigits[c & 15];
  }
  return "key 0x" + hex;
}

std::string internal::SkipDamagedBlock(const std::function<rocksdb::Iterator*()>& make_iterator,
                                       std::string_view last_good, bool* at_end) {
  // Smallest x whose Seek lands on readable data: a Seek into the damaged block fails, a
  // Seek past it succeeds, so the predicate switches once on (last_good, 2^128).
  auto readable = [&](U128 x, std::string* first_key) {
    std::unique_ptr<rocksdb::Iterator> it(make_iterator());
    const std::string target = NumberKey(x);
    it->Seek(rocksdb::Slice(target));
    if (!it->status().ok()) return false;
    *first_key = it->Valid() ? it->key().ToString() : std::string();
    return true;
  };
  U128 lo = last_good.empty() ? 0 : KeyNumber(last_good) + 1;
  U128 hi = ~U128{0};
  std::string found;
  if (!readable(hi, &found)) {
    *at_end = true;
    return {};
  }
  while (lo < hi) {
    const U128 mid = lo + (hi - lo) / 2;
    std::string key;
    if (readable(mid, &key)) {
      hi = mid;
    } else {
      lo = mid + 1;
    }
  }
  readable(lo, &found);
  *at_end = found.empty();
  return found;
}

Status Store::Verify(VerifyReport* report) const {
  *report = VerifyReport();
  VerifyReport& r = *report;
  const Impl& d = *impl_;
  Impl::ReadView view(d);
  const rocksdb::ReadOptions& ro = view.options();

  // 1. Every block of every table file.
  std::vector<rocksdb::LiveFileMetaData> files;
  d.db->GetLiveFilesMetaData(&files);
  std::sort(files.begin(), files.end(),
            [](const auto& a, const auto& b) { return a.file_number < b.file_number; });
  for (const rocksdb::LiveFileMetaData& f : files) {
    const std::string path = f.db_path + "/" + f.relative_filename;
    rocksdb::Options options;
    rocksdb::SstFileReader reader(options);
    rocksdb::Status s = reader.Open(path);
    if (s.ok()) s = reader.VerifyChecksum();
    if (!s.ok()) {
      r.problems.push_back("table file " + f.relative_filename + " (" + f.column_family_name +
                           ", " + DescribeKey(f.column_family_name, f.smallestkey) + " .. " +
                           DescribeKey(f.column_family_name, f.largestkey) + "): " + s.ToString());
      continue;
    }
    ++r.table_files;
    r.table_bytes += f.size;
  }

  // 2. The event log, stepping over damaged blocks to say exactly what is unreadable.
  {
    auto make = [&] { return d.db->NewIterator(ro, d.events); };
    std::unique_ptr<rocksdb::Iterator> it(make());
    std::string last_good;
    std::string why;
    it->SeekToFirst();
    while (true) {
      for (; it->Valid(); it->Next()) {
        auto seq = keys::ParseEventKey(AsView(it->key()));
        if (!seq) {
          r.problems.push_back("events: a key is not an 8-byte sequence");
        } else {
          Event event;
          if (records::DecodeEvent(AsView(it->value()), *seq, &event, &why)) {
            ++r.events;
          } else {
            r.problems.push_back("event " + std::to_string(*seq) + ": " + why);
          }
        }
        last_good = it->key().ToString();
      }
      if (it->status().ok()) break;
      const std::string error = it->status().ToString();
      bool at_end = false;
      const std::string next = SkipDamagedBlock(make, last_good, &at_end);
      const uint64_t from = last_good.size() == 8 ? keys::ReadBigEndian64(last_good.data()) + 1 : 1;
      std::string range = "events from " + std::to_string(from);
      if (!at_end && next.size() == 8) {
        range += " to " + std::to_string(keys::ReadBigEndian64(next.data()) - 1);
      }
      r.problems.push_back(range + " are unreadable: " + error);
      if (at_end) break;
      it.reset(make());
      it->Seek(rocksdb::Slice(next));
      last_good.clear();
    }
  }

  // 3. Meta values and counters.
  const MetaReader stored_meta = d.Meta(ro);
  auto meta64 = [&](std::string_view key, uint64_t* value) {
    std::optional<uint64_t> stored;
    Status s = stored_meta.GetU64(key, &stored);
    if (!s.ok()) r.problems.push_back(s.message());
    *value = stored.value_or(0);
  };
  uint64_t cursor = 0, active = 0, next_version = 0, recorded_last = 0;
  meta64(keys::kMetaCursor, &cursor);
  meta64(keys::kMetaActiveVersion, &active);
  meta64(keys::kMetaNextVersion, &next_version);
  meta64(keys::kMetaLastSequence, &recorded_last);
  Canary canary;
  if (Status s = d.ReadCanary(ro, &canary); !s.ok()) {
    r.problems.push_back(s.message());
  } else if (canary.version != 0 && d.CheckComplete(ro, canary.version).IsNotFound()) {
    r.problems.push_back("the canary names version " + std::to_string(canary.version) +
                         ", which is not stored");
  }
  if (cursor > d.last_seq.load()) {
    r.problems.push_back("the consumer cursor (" + std::to_string(cursor) +
                         ") is beyond the end of the event log (" +
                         std::to_string(d.last_seq.load()) + ")");
  }

  // 4. Dictionaries, both directions.
  uint32_t counts[2] = {0, 0};
  for (IdSpace space : {IdSpace::kUser, IdSpace::kItem}) {
    const uint32_t count = d.Count(space).load();
    counts[space == IdSpace::kUser ? 0 : 1] = count;
    std::vector<std::string> names;
    Status s = LoadIds(space, count, &names);
    if (!s.ok()) {
      r.problems.push_back(s.message());
      continue;
    }
    const std::string prefix = std::string(1, static_cast<char>(space)) + "x";
    std::unique_ptr<rocksdb::Iterator> it(d.db->NewIterator(ro, d.ids));
    for (it->Seek(AsSlice(prefix)); it->Valid() && StartsWith(it->key(), prefix); it->Next()) {
      const std::string external(it->key().data() + prefix.size(),
                                 it->key().size() - prefix.size());
      auto index = keys::ParseFixed32(AsView(it->value()));
      if (!index || *index >= count || names[*index] != external) {
        r.problems.push_back("ids: " + std::string(keys::SpaceName(space)) + " id '" + external +
                             "' maps to an index whose entry names another id");
      }
    }
    if (!it->status().ok()) r.problems.push_back("ids: " + it->status().ToString());
  }

  // 5. Interactions against the dictionaries, and the live degrees against the interactions.
  std::vector<uint32_t> counted(counts[1], 0);
  Status s = ForEachInteraction([&](uint32_t user, uint32_t item) {
    if (user >= counts[0] || item >= counts[1]) {
      r.problems.push_back("interaction (user " + std::to_string(user) + ", item " +
                           std::to_string(item) + ") names an unknown user or item");
      return;
    }
    ++counted[item];
  });
  if (!s.ok()) {
    r.problems.push_back(s.message());
  } else {
    std::vector<uint32_t> degrees;
    s = LoadItemDegrees(&degrees);
    if (!s.ok()) {
      r.problems.push_back(s.message());
    } else {
      size_t differing = 0;
      std::string first;
      for (size_t i = 0; i < degrees.size() && i < counted.size(); ++i) {
        if (degrees[i] == counted[i]) continue;
        if (differing++ == 0) {
          first = "item " + std::to_string(i) + " has degree " + std::to_string(degrees[i]) +
                  " but " + std::to_string(counted[i]) + " interactions";
        }
      }
      if (differing > 0) {
        r.problems.push_back("degrees: " + std::to_string(differing) +
                             " items disagree with the interactions (first: " + first + ")");
      }
    }
  }

  // 6. Every kept version in full (reading a block verifies its checksum).
  std::vector<uint64_t> versions;
  {
    // Listed by hand rather than with ListVersionNumbers, so that a damaged block of
    // manifests hides only the versions in it.
    const std::string prefix = keys::ManifestPrefix();
    auto make = [&] { return d.db->NewIterator(ro, d.models); };
    std::unique_ptr<rocksdb::Iterator> it(make());
    std::string last_good;
    for (it->Seek(AsSlice(prefix));;) {
      for (; it->Valid() && StartsWith(it->key(), prefix); it->Next()) {
        last_good = it->key().ToString();
        auto version = keys::ParseManifestKey(AsView(it->key()));
        if (version) {
          versions.push_back(*version);
        } else {
          r.problems.push_back("models: malformed manifest key");
        }
      }
      if (it->status().ok()) break;
      r.problems.push_back("models: manifests after " +
                           (last_good.empty() ? std::string("the first")
                                              : DescribeKey(keys::kModelsFamily, last_good)) +
                           " are unreadable: " + it->status().ToString());
      bool at_end = false;
      const std::string next =
          SkipDamagedBlock(make, last_good.empty() ? prefix : last_good, &at_end);
      if (at_end) break;
      it.reset(make());
      it->Seek(rocksdb::Slice(next));
    }
  }
  for (uint64_t v : versions) {
    Status c = d.CheckComplete(ro, v);
    if (c.ok()) {
      ++r.versions;
    } else {
      r.damaged_versions.push_back(v);
      r.problems.push_back(c.message());
    }
  }
  if (active != 0) {
    const bool kept = std::find(versions.begin(), versions.end(), active) != versions.end();
    const bool damaged = std::find(r.damaged_versions.begin(), r.damaged_versions.end(), active) !=
                         r.damaged_versions.end();
    if (!kept) {
      r.problems.push_back("the active version " + std::to_string(active) + " is not stored");
    } else if (damaged) {
      r.problems.push_back("the active version " + std::to_string(active) + " is damaged");
    }
  }
  if (!versions.empty() && next_version != 0 && next_version <= versions.back()) {
    r.problems.push_back("meta: next version " + std::to_string(next_version) +
                         " is not above the newest stored version " +
                         std::to_string(versions.back()));
  }
  (void)recorded_last;
  return Status::Ok();
}

}  // namespace plumb::store
