#include "cli/store_access.h"

#include <unistd.h>

#include <filesystem>

#include "store/version_reader.h"
#include "trainer/online/stored_embeddings.h"

namespace plumb::cli {

Status OpenForWrite(const std::string& db, const store::StoreOptions& options,
                    std::unique_ptr<store::Store>* out, bool* created) {
  namespace fs = std::filesystem;
  std::error_code ec;
  const bool existed = fs::exists(db, ec);
  if (existed) {
    if (!fs::is_directory(db, ec)) {
      return Status::InvalidArgument(db + " is a file, not a store directory");
    }
    // A store directory always holds RocksDB's CURRENT file. A directory without one that
    // holds anything else is someone's: RocksDB would write its files among theirs.
    if (!fs::exists(fs::path(db) / "CURRENT", ec) && !fs::is_empty(db, ec)) {
      if (!options.create_if_missing) return Status::NotFound("no store at " + db);
      return Status::InvalidArgument(
          db +
          " is a directory that holds other files and no plumb store; give a new or an "
          "empty directory for the store");
    }
  } else if (!options.create_if_missing) {
    return Status::NotFound("no store at " + db);
  }
  Status s = store::Store::OpenPrimary(db, options, out);
  if (created != nullptr) *created = s.ok() && !existed;
  if (s.code() == Status::Code::kUnavailable) {
    return Status::Unavailable(
        db + " is in use by another process (is plumb-train running? while it runs, change "
             "versions through its ModelControl service): " + s.message());
  }
  return s;
}

void RemoveCreatedStore(const std::string& db) {
  std::error_code ec;
  std::filesystem::remove_all(db, ec);
}

Status OpenForRead(const std::string& db, std::unique_ptr<store::Store>* out) {
  if (!std::filesystem::exists(db)) return Status::NotFound("no store at " + db);
  const std::string scratch = (std::filesystem::temp_directory_path() /
                               ("plumb-cli-" + std::to_string(::getpid())))
                                  .string();
  Status s = store::Store::OpenSecondary(db, scratch, out);
  if (s.ok()) s = (*out)->CatchUp();
  return s;
}

Status LoadModel(const store::Store& store, uint64_t version, LoadedModel* out) {
  if (version == 0) {
    PLUMB_RETURN_IF_ERROR(store.GetActiveVersion(&version));
    if (version == 0) return Status::FailedPrecondition("no version is active in this store");
  }
  store::VersionReader reader;
  PLUMB_RETURN_IF_ERROR(store::VersionReader::Open(store, version, &reader));
  LoadedModel m;
  m.manifest = reader.manifest();
  const auto& man = m.manifest;
  PLUMB_RETURN_IF_ERROR(online::ReadEmbeddings(reader, 1, &m.model));
  std::vector<trainer::Pair> pairs;
  PLUMB_RETURN_IF_ERROR(reader.ForEachInteraction([&](uint32_t u, uint32_t i) {
    pairs.push_back({u, i});
  }));
  PLUMB_RETURN_IF_ERROR(
      trainer::Interactions::Build(pairs, man.num_users, man.num_items, &m.train));
  PLUMB_RETURN_IF_ERROR(reader.LoadIds(store::IdSpace::kUser, &m.user_ids));
  PLUMB_RETURN_IF_ERROR(reader.LoadIds(store::IdSpace::kItem, &m.item_ids));
  *out = std::move(m);
  return Status::Ok();
}

}  // namespace plumb::cli
