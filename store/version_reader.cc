#include "store/version_reader.h"

#include <string>

namespace plumb::store {

Status VersionReader::Open(const Store& store, uint64_t version, VersionReader* out) {
  VersionReader r;
  r.store_ = &store;
  PLUMB_RETURN_IF_ERROR(store.ReadManifest(version, &r.manifest_));
  const std::string where = "version " + std::to_string(version) + ": ";
  if (r.manifest_.version != version) {
    return Status::Corruption(where + "manifest names version " +
                              std::to_string(r.manifest_.version));
  }
  if (r.manifest_.dim == 0) return Status::Corruption(where + "manifest says dim 0");
  *out = std::move(r);
  return Status::Ok();
}

Status VersionReader::ReadMatrix(MatrixKind kind, std::span<float> dest) const {
  return store_->ReadMatrix(manifest_.version, kind, dest);
}

Status VersionReader::ReadItemDegrees(std::vector<uint32_t>* out) const {
  PLUMB_RETURN_IF_ERROR(store_->ReadVersionDegrees(manifest_.version, out));
  if (out->size() != manifest_.num_items) {
    return Status::Corruption("version " + std::to_string(manifest_.version) + ": " +
                              std::to_string(out->size()) + " stored degrees for " +
                              std::to_string(manifest_.num_items) + " items");
  }
  return Status::Ok();
}

Status VersionReader::LoadIds(IdSpace space, std::vector<std::string>* out) const {
  return store_->LoadIds(space, space == IdSpace::kUser ? manifest_.num_users : manifest_.num_items,
                         out);
}

Status VersionReader::ForEachInteraction(const std::function<void(uint32_t, uint32_t)>& fn) const {
  const uint32_t users = manifest_.num_users, items = manifest_.num_items;
  return store_->ForEachInteraction([&](uint32_t u, uint32_t i) {
    if (u < users && i < items) fn(u, i);
  });
}

}  // namespace plumb::store
