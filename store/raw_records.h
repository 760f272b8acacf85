// TEST ONLY — never call from a shipped binary (the target plumb_store_testing is linked
// only by tests). Reads and overwrites single raw records of a *closed* store, bypassing
// every check of Store, so that tests can damage a store on purpose and see that the store
// reports Corruption instead of crashing or returning garbage.
//
// `family` is a column family name (store/keys.h: keys::kEventsFamily, ...); keys are built
// with the functions of store/keys.h. Each call opens the database, does one synced write
// or one read, and closes it again; it fails with IoError while a Store holds the directory.
#pragma once

#include <functional>
#include <memory>
#include <string>
#include <string_view>
#include <vector>

#include "core/status.h"

namespace plumb::store::testing {

Status PutRawRecord(const std::string& dir, std::string_view family, std::string_view key,
                    std::string_view value);

Status DeleteRawRecord(const std::string& dir, std::string_view family, std::string_view key);

// NotFound when the key is absent.
Status GetRawRecord(const std::string& dir, std::string_view family, std::string_view key,
                    std::string* value);

// Paths of the live table files of `family`, newest (highest file number) first.
Status ListTableFiles(const std::string& dir, std::string_view family,
                      std::vector<std::string>* paths);

// A raw writer that keeps `dir` open as a RocksDB primary with every column family plumb
// uses (created if missing), for tests that write records no Store would and read them back
// through a Store opened as a secondary. Writes are not synced.
class RawWriter {
 public:
  static Status Open(const std::string& dir, std::unique_ptr<RawWriter>* out);
  ~RawWriter();
  RawWriter(const RawWriter&) = delete;
  RawWriter& operator=(const RawWriter&) = delete;
  Status Put(std::string_view family, std::string_view key, std::string_view value);
  Status Delete(std::string_view family, std::string_view key);

 private:
  RawWriter() = default;
  struct Db;
  std::unique_ptr<Db> db_;
};

// Reads every table file in `dir` (live or not, decompressed) and calls fn(file, key, value)
// for every record it holds; *deletions receives the number of deletion markers the files
// hold (their keys are not visible through a table reader).
Status ForEachTableRecord(
    const std::string& dir,
    const std::function<void(const std::string&, std::string_view, std::string_view)>& fn,
    uint64_t* deletions);

}  // namespace plumb::store::testing
