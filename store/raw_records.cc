#include "store/raw_records.h"

#include <rocksdb/db.h>
#include <rocksdb/options.h>

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

}  // namespace plumb::store::testing
