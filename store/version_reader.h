// VersionReader: what every reader of a stored version needs, written once: the manifest
// (checked to name the version and to have a dimension), the two matrices, the version's own
// ids and the version's interactions (the pairs inside its users x items; the dictionaries and
// the interactions only grow, so later ones are left out).
//
// Used by the plumb command line (cli/store_access.cc), plumb-serve's snapshot loading
// (server/snapshot.cc) and the trainers' embedding load (trainer/online/stored_embeddings.h).
//
// Holds a reference to the store, which must outlive it. Thread-compatible: the store's
// const reads are thread-safe, so one reader may be used from several threads.
#pragma once

#include <cstdint>
#include <functional>
#include <span>
#include <string>
#include <vector>

#include "core/status.h"
#include "store/store.h"

namespace plumb::store {

class VersionReader {
 public:
  // Reads version `version`'s manifest. NotFound for a version not kept; Corruption for a
  // manifest that names another version or has dimension 0.
  static Status Open(const Store& store, uint64_t version, VersionReader* out);

  VersionReader() = default;

  const VersionManifest& manifest() const { return manifest_; }
  uint64_t version() const { return manifest_.version; }

  // Fills dest (exactly rows * dim floats of that matrix) with the version's users or
  // items. Corruption for a missing or wrongly sized block.
  Status ReadMatrix(MatrixKind kind, std::span<float> dest) const;

  // The training degree of each of the version's items, as published with it. Corruption
  // when the stored degrees do not number num_items.
  Status ReadItemDegrees(std::vector<uint32_t>* out) const;

  // The version's user or item ids: rows [0, num_users) or [0, num_items).
  Status LoadIds(IdSpace space, std::vector<std::string>* out) const;

  // Calls fn(user, item) for each stored interaction inside the version's users x items, in
  // stored order (user, then item).
  Status ForEachInteraction(const std::function<void(uint32_t, uint32_t)>& fn) const;

 private:
  const Store* store_ = nullptr;
  VersionManifest manifest_;
};

}  // namespace plumb::store
