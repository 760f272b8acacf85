// Opening the store from the command line, and reading a version back as a model.
#pragma once

#include <memory>
#include <string>
#include <vector>

#include "core/status.h"
#include "store/store.h"
#include "trainer/embeddings.h"
#include "trainer/interactions.h"

namespace plumb::cli {

// Opens `db` for writing. When another process (plumb-train) holds it, the error says so
// and points at the ModelControl service. With options.create_if_missing, a missing or
// empty directory becomes a new store; an existing directory that holds other files and no
// store is refused (InvalidArgument), so that RocksDB never writes among a user's files.
// Without it, anything but a store is NotFound. *created (may be null) tells whether this
// call made a new store, so that a caller whose first write then fails can remove it
// again (RemoveCreatedStore) instead of leaving an empty store behind.
Status OpenForWrite(const std::string& db, const store::StoreOptions& options,
                    std::unique_ptr<store::Store>* out, bool* created = nullptr);

// Deletes a store directory that OpenForWrite created (close the store first).
void RemoveCreatedStore(const std::string& db);

// Opens an existing `db` for reading only, as a follower, so it works while plumb-train
// runs. The follower's scratch directory is temporary and removed by the returned store's
// owner at exit (best effort).
Status OpenForRead(const std::string& db, std::unique_ptr<store::Store>* out);

// A stored version as something to score with: its embeddings, its training interactions
// (the store's interaction sets restricted to the version's users and items) and the
// external ids of its rows.
struct LoadedModel {
  store::VersionManifest manifest;
  trainer::Embeddings model;
  trainer::Interactions train;
  std::vector<std::string> user_ids;
  std::vector<std::string> item_ids;
};

// version 0 means the active one (FailedPrecondition when none is active).
Status LoadModel(const store::Store& store, uint64_t version, LoadedModel* out);

}  // namespace plumb::cli
