#include "store/raw_records.h"

#include <rocksdb/db.h>
#include <rocksdb/metadata.h>
#include <rocksdb/options.h>
#include <rocksdb/sst_file_reader.h>
#include <rocksdb/table_properties.h>

#include <algorithm>
#include <filesystem>
#include <functional>
#include <memory>
#include <vector>

namespace plumb::store::testing {

namespace {

// Opens `dir` with every column family it has, runs `op` on `family`, and closes it.
Status WithFamily(
    const std::string& dir, std::string_view family,
    const std::function<rocksdb::Status(rocksdb::DB*, rocksdb::ColumnFamilyHandle*)>& op) {
  rocksdb::DBOptions options;
  std::vector<std::string> names;
  rocksdb::Status s = rocksdb::DB::ListColumnFamilies(options, dir, &names);
  if (!s.ok()) return Status::IoError("listing families of " + dir + ": " + s.ToString());
  std::vector<rocksdb::ColumnFamilyDescriptor> descriptors;
  int target = -1;
  for (const std::string& name : names) {
    if (name == family) target = static_cast<int>(descriptors.size());
    descriptors.emplace_back(name, rocksdb::ColumnFamilyOptions());
  }
  if (target < 0) return Status::NotFound("no column family " + std::string(family));
  rocksdb::DB* db = nullptr;
  std::vector<rocksdb::ColumnFamilyHandle*> handles;
  s = rocksdb::DB::Open(options, dir, descriptors, &handles, &db);
  if (!s.ok()) return Status::IoError("opening " + dir + ": " + s.ToString());
  rocksdb::Status result = op(db, handles[target]);
  for (auto* h : handles) db->DestroyColumnFamilyHandle(h);
  db->Close();
  delete db;
  if (result.IsNotFound()) return Status::NotFound(result.ToString());
  if (!result.ok()) return Status::IoError(result.ToString());
  return Status::Ok();
}

rocksdb::Slice AsSlice(std::string_view s) { return rocksdb::Slice(s.data(), s.size()); }

rocksdb::WriteOptions Synced() {
  rocksdb::WriteOptions w;
  w.sync = true;
  return w;
}

}  // namespace

Status PutRawRecord(const std::string& dir, std::string_view family, std::string_view key,
                    std::string_view value) {
  return WithFamily(dir, family, [&](rocksdb::DB* db, rocksdb::ColumnFamilyHandle* cf) {
    return db->Put(Synced(), cf, AsSlice(key), AsSlice(value));
  });
}

Status DeleteRawRecord(const std::string& dir, std::string_view family, std::string_view key) {
  return WithFamily(dir, family, [&](rocksdb::DB* db, rocksdb::ColumnFamilyHandle* cf) {
    return db->Delete(Synced(), cf, AsSlice(key));
  });
}

Status GetRawRecord(const std::string& dir, std::string_view family, std::string_view key,
                    std::string* value) {
  return WithFamily(dir, family, [&](rocksdb::DB* db, rocksdb::ColumnFamilyHandle* cf) {
    return db->Get(rocksdb::ReadOptions(), cf, AsSlice(key), value);
  });
}

Status ListTableFiles(const std::string& dir, std::string_view family,
                      std::vector<std::string>* paths) {
  paths->clear();
  // Read-only, so that looking changes nothing (no flush, no compaction).
  rocksdb::DBOptions options;
  std::vector<std::string> names;
  rocksdb::Status s = rocksdb::DB::ListColumnFamilies(options, dir, &names);
  if (!s.ok()) return Status::IoError("listing families of " + dir + ": " + s.ToString());
  std::vector<rocksdb::ColumnFamilyDescriptor> descriptors;
  for (const std::string& name : names) {
    descriptors.emplace_back(name, rocksdb::ColumnFamilyOptions());
  }
  rocksdb::DB* db = nullptr;
  std::vector<rocksdb::ColumnFamilyHandle*> handles;
  s = rocksdb::DB::OpenForReadOnly(options, dir, descriptors, &handles, &db);
  if (!s.ok()) return Status::IoError("opening " + dir + ": " + s.ToString());
  std::vector<rocksdb::LiveFileMetaData> files;
  db->GetLiveFilesMetaData(&files);
  for (auto* h : handles) db->DestroyColumnFamilyHandle(h);
  delete db;
  std::sort(files.begin(), files.end(),
            [](const auto& a, const auto& b) { return a.file_number > b.file_number; });
  for (const auto& f : files) {
    if (f.column_family_name == family) paths->push_back(f.db_path + "/" + f.relative_filename);
  }
  return Status::Ok();
}

Status ForEachTableRecord(
    const std::string& dir,
    const std::function<void(const std::string&, std::string_view, std::string_view)>& fn,
    uint64_t* deletions) {
  *deletions = 0;
  std::error_code ec;
  for (const auto& e : std::filesystem::directory_iterator(dir, ec)) {
    if (e.path().extension() != ".sst") continue;
    rocksdb::SstFileReader reader{rocksdb::Options()};
    rocksdb::Status s = reader.Open(e.path().string());
    if (!s.ok()) return Status::IoError(e.path().string() + ": " + s.ToString());
    if (auto props = reader.GetTableProperties()) *deletions += props->num_deletions;
    std::unique_ptr<rocksdb::Iterator> it(reader.NewIterator(rocksdb::ReadOptions()));
    const std::string name = e.path().filename().string();
    for (it->SeekToFirst(); it->Valid(); it->Next()) {
      fn(name, std::string_view(it->key().data(), it->key().size()),
         std::string_view(it->value().data(), it->value().size()));
    }
    if (!it->status().ok()) return Status::IoError(name + ": " + it->status().ToString());
  }
  if (ec) return Status::IoError(dir + ": " + ec.message());
  return Status::Ok();
}

struct RawWriter::Db {
  rocksdb::DB* db = nullptr;
  std::vector<rocksdb::ColumnFamilyHandle*> handles;
  std::vector<std::string> names;
  ~Db() {
    for (auto* h : handles) db->DestroyColumnFamilyHandle(h);
    if (db != nullptr) db->Close();
    delete db;
  }
  rocksdb::ColumnFamilyHandle* Family(std::string_view name) const {
    for (size_t k = 0; k < names.size(); ++k) {
      if (names[k] == name) return handles[k];
    }
    return nullptr;
  }
};

Status RawWriter::Open(const std::string& dir, std::unique_ptr<RawWriter>* out) {
  rocksdb::DBOptions options;
  options.create_if_missing = true;
  options.create_missing_column_families = true;
  auto db = std::make_unique<Db>();
  db->names = {rocksdb::kDefaultColumnFamilyName,
               "events",
               "event_ids",
               "ids",
               "interactions",
               "degrees",
               "models",
               "meta"};
  std::vector<rocksdb::ColumnFamilyDescriptor> descriptors;
  for (const std::string& name : db->names) {
    descriptors.emplace_back(name, rocksdb::ColumnFamilyOptions());
  }
  rocksdb::Status s = rocksdb::DB::Open(options, dir, descriptors, &db->handles, &db->db);
  if (!s.ok()) return Status::IoError("opening " + dir + ": " + s.ToString());
  out->reset(new RawWriter());
  (*out)->db_ = std::move(db);
  return Status::Ok();
}

RawWriter::~RawWriter() = default;

Status RawWriter::Put(std::string_view family, std::string_view key, std::string_view value) {
  rocksdb::ColumnFamilyHandle* cf = db_->Family(family);
  if (cf == nullptr) return Status::NotFound("no column family " + std::string(family));
  rocksdb::Status s = db_->db->Put(rocksdb::WriteOptions(), cf, AsSlice(key), AsSlice(value));
  return s.ok() ? Status::Ok() : Status::IoError(s.ToString());
}

Status RawWriter::Delete(std::string_view family, std::string_view key) {
  rocksdb::ColumnFamilyHandle* cf = db_->Family(family);
  if (cf == nullptr) return Status::NotFound("no column family " + std::string(family));
  rocksdb::Status s = db_->db->Delete(rocksdb::WriteOptions(), cf, AsSlice(key));
  return s.ok() ? Status::Ok() : Status::IoError(s.ToString());
}

}  // namespace plumb::store::testing
