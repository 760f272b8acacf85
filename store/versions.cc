// Store's embedding versions: reading manifests and blocks, listing, the active and pinned
// versions, deleting one.
#include <algorithm>
#include <cstring>

#include "store/keys.h"
#include "store/records.h"
#include "store/store_impl.h"

namespace plumb::store {

using namespace internal;

Status Store::Impl::ListVersionNumbers(const rocksdb::ReadOptions& ro,
                                       std::vector<uint64_t>* out) const {
  out->clear();
  const std::string prefix = keys::ManifestPrefix();
  std::unique_ptr<rocksdb::Iterator> it(db->NewIterator(ro, models));
  for (it->Seek(AsSlice(prefix)); it->Valid() && StartsWith(it->key(), prefix); it->Next()) {
    auto version = keys::ParseManifestKey(AsView(it->key()));
    if (!version) return Status::Corruption("models: malformed manifest key");
    out->push_back(*version);
  }
  return FromRocks(it->status(), "models: listing versions");
}

Status Store::Impl::ActiveVersion(const rocksdb::ReadOptions& ro, uint64_t* version) const {
  std::optional<uint64_t> stored;
  Status s = Meta(ro).GetU64(keys::kMetaActiveVersion, &stored);
  *version = stored.value_or(0);
  return s;
}

Status Store::Impl::PinnedVersions(const rocksdb::ReadOptions& ro, std::set<uint64_t>* out) const {
  out->clear();
  std::string value;
  Status s = Get(ro, meta, keys::kMetaPinnedVersions, &value, "meta: pinned versions");
  if (s.IsNotFound()) return Status::Ok();
  PLUMB_RETURN_IF_ERROR(s);
  if (value.size() % 8 != 0) {
    return Status::Corruption("meta: pinned versions hold " + std::to_string(value.size()) +
                              " bytes, not a multiple of 8");
  }
  for (size_t at = 0; at < value.size(); at += 8) {
    out->insert(keys::ReadBigEndian64(value.data() + at));
  }
  return Status::Ok();
}

Status Store::Impl::ReadCanary(const rocksdb::ReadOptions& ro, Canary* out) const {
  *out = Canary{};
  std::string value;
  Status s = Get(ro, meta, keys::kMetaCanary, &value, "meta: canary");
  if (s.IsNotFound()) return Status::Ok();
  PLUMB_RETURN_IF_ERROR(s);
  if (value.size() != 20) {
    return Status::Corruption("meta: canary holds " + std::to_string(value.size()) +
                              " bytes, not 20");
  }
  const std::string_view v(value);
  out->version = *keys::ParseFixed64(v.substr(0, 8));
  out->share_bp = *keys::ParseFixed32(v.substr(8, 4));
  out->started_ms = static_cast<int64_t>(*keys::ParseFixed64(v.substr(12, 8)));
  if (out->version == 0 || out->share_bp == 0 || out->share_bp > 10000) {
    const uint32_t bp = out->share_bp;
    *out = Canary{};
    return Status::Corruption("meta: canary names version 0 or a share of " + std::to_string(bp) +
                              " basis points");
  }
  return Status::Ok();
}

Status Store::Impl::ReadManifestLocked(const rocksdb::ReadOptions& ro, uint64_t version,
                                       VersionManifest* out, uint32_t* rows_per_block) const {
  std::string value;
  Status s = Get(ro, models, keys::ManifestKey(version), &value, VersionWhat(version, "manifest"));
  if (s.IsNotFound()) {
    return Status::NotFound("version " + std::to_string(version) + " is not stored");
  }
  PLUMB_RETURN_IF_ERROR(s);
  std::string why;
  if (!records::DecodeManifest(value, version, out, rows_per_block, &why)) {
    return Status::Corruption(VersionWhat(version, "manifest: ") + why);
  }
  return Status::Ok();
}

Status Store::Impl::ReadBlocks(const rocksdb::ReadOptions& ro, uint64_t version,
                               std::string_view what,
                               const std::function<std::string(uint32_t)>& key_of, uint64_t rows,
                               uint64_t row_bytes, uint32_t rows_per_block, char* dest) const {
  const uint64_t blocks = BlockCount(rows, rows_per_block);
  if (blocks > UINT32_MAX)
    return Status::Corruption(VersionWhat(version, what) + ": too many blocks");
  rocksdb::PinnableSlice value;
  for (uint64_t b = 0; b < blocks; ++b) {
    const uint64_t first_row = b * rows_per_block;
    const uint64_t block_rows = std::min<uint64_t>(rows_per_block, rows - first_row);
    const uint64_t expected = block_rows * row_bytes;
    const std::string name = VersionWhat(version, what) + ": block " + std::to_string(b);
    value.Reset();
    rocksdb::Status s = db->Get(ro, models, AsSlice(key_of(static_cast<uint32_t>(b))), &value);
    if (s.IsNotFound()) return Status::Corruption(name + " is missing");
    PLUMB_RETURN_IF_ERROR(FromRocks(s, name));
    if (value.size() != expected) {
      return Status::Corruption(name + " holds " + std::to_string(value.size()) +
                                " bytes, expected " + std::to_string(expected));
    }
    if (dest != nullptr && expected > 0) {
      std::memcpy(dest + first_row * row_bytes, value.data(), expected);
    }
  }
  return Status::Ok();
}

Status Store::Impl::CheckComplete(const rocksdb::ReadOptions& ro, uint64_t version) const {
  VersionManifest manifest;
  uint32_t rpb = 0;
  PLUMB_RETURN_IF_ERROR(ReadManifestLocked(ro, version, &manifest, &rpb));
  const uint64_t row_bytes = uint64_t{manifest.dim} * sizeof(float);
  for (MatrixKind kind : {MatrixKind::kUsers, MatrixKind::kItems}) {
    const uint64_t rows = kind == MatrixKind::kUsers ? manifest.num_users : manifest.num_items;
    PLUMB_RETURN_IF_ERROR(ReadBlocks(
        ro, version, std::string(keys::MatrixName(kind)) + " matrix",
        [&](uint32_t b) { return keys::BlockKey(version, kind, b); }, rows, row_bytes, rpb,
        nullptr));
  }
  return ReadBlocks(
      ro, version, "item degrees", [&](uint32_t b) { return keys::VersionDegreesKey(version, b); },
      manifest.num_items, sizeof(uint32_t), rpb, nullptr);
}

Status Store::Impl::DeleteVersion(const rocksdb::ReadOptions& ro, uint64_t version,
                                  rocksdb::WriteBatch* batch) const {
  // Per-key deletes rather than range deletes: a version has few blocks, and point
  // tombstones keep every reader (and the secondary's replay) on the simplest path.
  for (const std::string& prefix :
       {keys::BlockPrefix(version), keys::VersionDegreesPrefix(version)}) {
    std::unique_ptr<rocksdb::Iterator> it(db->NewIterator(ro, models));
    for (it->Seek(AsSlice(prefix)); it->Valid() && StartsWith(it->key(), prefix); it->Next()) {
      PLUMB_RETURN_IF_ERROR(FromRocks(batch->Delete(models, it->key()), "pruning"));
    }
    PLUMB_RETURN_IF_ERROR(FromRocks(it->status(), VersionWhat(version, "pruning")));
  }
  return FromRocks(batch->Delete(models, AsSlice(keys::ManifestKey(version))), "pruning");
}

// ---- the public reads and pins ------------------------------------------------------------

Status Store::GetActiveVersion(uint64_t* version) const {
  Impl::ReadView view(*impl_);
  return impl_->ActiveVersion(view.options(), version);
}

Status Store::GetCanary(Canary* out) const {
  Impl::ReadView view(*impl_);
  return impl_->ReadCanary(view.options(), out);
}

Status Store::ListVersions(std::vector<VersionManifest>* out) const {
  out->clear();
  Impl::ReadView view(*impl_);
  std::vector<uint64_t> versions;
  PLUMB_RETURN_IF_ERROR(impl_->ListVersionNumbers(view.options(), &versions));
  std::set<uint64_t> pinned;
  PLUMB_RETURN_IF_ERROR(impl_->PinnedVersions(view.options(), &pinned));
  for (auto v = versions.rbegin(); v != versions.rend(); ++v) {
    VersionManifest manifest;
    uint32_t rpb = 0;
    Status s = impl_->ReadManifestLocked(view.options(), *v, &manifest, &rpb);
    // Listed a moment ago under the same view, so a NotFound here is damage too.
    if (s.IsNotFound()) return Status::Corruption(VersionWhat(*v, "manifest vanished"));
    PLUMB_RETURN_IF_ERROR(s);
    manifest.pinned = pinned.contains(*v);
    out->push_back(std::move(manifest));
  }
  return Status::Ok();
}

Status Store::ReadManifest(uint64_t version, VersionManifest* out) const {
  Impl::ReadView view(*impl_);
  uint32_t rpb = 0;
  PLUMB_RETURN_IF_ERROR(impl_->ReadManifestLocked(view.options(), version, out, &rpb));
  std::set<uint64_t> pinned;
  PLUMB_RETURN_IF_ERROR(impl_->PinnedVersions(view.options(), &pinned));
  out->pinned = pinned.contains(version);
  return Status::Ok();
}

Status Store::ReadMatrix(uint64_t version, MatrixKind kind, std::span<float> dest) const {
  Impl::ReadView view(*impl_);
  VersionManifest manifest;
  uint32_t rpb = 0;
  PLUMB_RETURN_IF_ERROR(impl_->ReadManifestLocked(view.options(), version, &manifest, &rpb));
  const uint64_t rows = kind == MatrixKind::kUsers ? manifest.num_users : manifest.num_items;
  const std::string what = std::string(keys::MatrixName(kind)) + " matrix";
  if (dest.size() != rows * manifest.dim) {
    return Status::InvalidArgument("destination holds " + std::to_string(dest.size()) +
                                   " floats; " + VersionWhat(version, what) + " has " +
                                   std::to_string(rows) + " x " + std::to_string(manifest.dim));
  }
  rocksdb::ReadOptions ro = view.options();
  ro.fill_cache = false;  // read once into the caller's buffer; keep the cache for lookups
  return impl_->ReadBlocks(
      ro, version, what, [&](uint32_t b) { return keys::BlockKey(version, kind, b); }, rows,
      uint64_t{manifest.dim} * sizeof(float), rpb, reinterpret_cast<char*>(dest.data()));
}

Status Store::ReadVersionDegrees(uint64_t version, std::vector<uint32_t>* out) const {
  out->clear();
  Impl::ReadView view(*impl_);
  VersionManifest manifest;
  uint32_t rpb = 0;
  PLUMB_RETURN_IF_ERROR(impl_->ReadManifestLocked(view.options(), version, &manifest, &rpb));
  std::vector<uint32_t> degrees(manifest.num_items);
  PLUMB_RETURN_IF_ERROR(impl_->ReadBlocks(
      view.options(), version, "item degrees",
      [&](uint32_t b) { return keys::VersionDegreesKey(version, b); }, manifest.num_items,
      sizeof(uint32_t), rpb, reinterpret_cast<char*>(degrees.data())));
  *out = std::move(degrees);
  return Status::Ok();
}

Status Store::SetPinned(uint64_t version, bool pinned) {
  PLUMB_RETURN_IF_ERROR(impl_->RequirePrimary("SetPinned"));
  std::lock_guard write_lock(impl_->write_mu);
  const rocksdb::ReadOptions ro;
  VersionManifest manifest;
  uint32_t rpb = 0;
  PLUMB_RETURN_IF_ERROR(impl_->ReadManifestLocked(ro, version, &manifest, &rpb));
  std::set<uint64_t> pins;
  PLUMB_RETURN_IF_ERROR(impl_->PinnedVersions(ro, &pins));
  if (pins.contains(version) == pinned) return Status::Ok();
  if (pinned) {
    pins.insert(version);
  } else {
    pins.erase(version);
  }
  std::string value;
  for (uint64_t v : pins) keys::PutBigEndian64(&value, v);
  rocksdb::WriteBatch batch;
  batch.Put(impl_->meta, AsSlice(keys::kMetaPinnedVersions), AsSlice(value));
  return impl_->Write(&batch, std::string(pinned ? "pinning" : "unpinning") + " version " +
                                  std::to_string(version));
}

}  // namespace plumb::store
