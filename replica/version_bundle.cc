#include "replica/version_bundle.h"

#include <zlib.h>

#include <algorithm>
#include <bit>
#include <cstring>

#include "store/store.h"
#include "store/version_reader.h"

namespace plumb::replica {
namespace {

constexpr std::string_view kBundleMagic = "PLUMBVB1";
constexpr std::string_view kChunkMagic = "PVC1";
constexpr std::string_view kTrailerMagic = "PVT1";
constexpr size_t kTrailerBytes = 32;

static_assert(std::endian::native == std::endian::little, "the formats are little-endian");

template <typename T>
void Put(std::string* out, T value) {
  out->append(reinterpret_cast<const char*>(&value), sizeof(T));
}

void PutStr(std::string* out, std::string_view s) {
  Put<uint32_t>(out, static_cast<uint32_t>(s.size()));
  out->append(s);
}

template <typename T>
void PutArray(std::string* out, const T* values, size_t count) {
  out->append(reinterpret_cast<const char*>(values), count * sizeof(T));
}

// Bounds-checked reading; every failure says what was being read.
class Reader {
 public:
  explicit Reader(std::string_view bytes) : rest_(bytes) {}
  template <typename T>
  Status Get(T* value, const char* what) {
    if (rest_.size() < sizeof(T)) return Truncated(what);
    std::memcpy(value, rest_.data(), sizeof(T));
    rest_.remove_prefix(sizeof(T));
    return Status::Ok();
  }
  Status GetStr(std::string* s, const char* what) {
    uint32_t n = 0;
    PLUMB_RETURN_IF_ERROR(Get(&n, what));
    if (rest_.size() < n) return Truncated(what);
    s->assign(rest_.data(), n);
    rest_.remove_prefix(n);
    return Status::Ok();
  }
  // count values of T into dest; the size is checked before anything is copied.
  template <typename T>
  Status GetArray(T* dest, uint64_t count, const char* what) {
    if (count > rest_.size() / sizeof(T)) return Truncated(what);
    std::memcpy(dest, rest_.data(), count * sizeof(T));
    rest_.remove_prefix(count * sizeof(T));
    return Status::Ok();
  }
  // Whether count values of `size` bytes each can still follow (before allocating them).
  bool Fits(uint64_t count, size_t size) const { return count <= rest_.size() / size; }
  size_t left() const { return rest_.size(); }

 private:
  static Status Truncated(const char* what) {
    return Status::Corruption(std::string("version bundle ends inside ") + what);
  }
  std::string_view rest_;
};

Status GetIds(Reader* r, uint32_t count, std::vector<std::string>* ids, const char* what) {
  // Each id takes at least its 4-byte length.
  if (!r->Fits(count, 4))
    return Status::Corruption(std::string("version bundle: too few bytes for ") + what);
  ids->resize(count);
  for (std::string& id : *ids) PLUMB_RETURN_IF_ERROR(r->GetStr(&id, what));
  return Status::Ok();
}

}  // namespace

uint32_t Crc32(std::string_view bytes) {
  return static_cast<uint32_t>(
      crc32_z(crc32_z(0L, Z_NULL, 0), reinterpret_cast<const Bytef*>(bytes.data()), bytes.size()));
}

Status ReadVersionBundle(const store::Store& store, uint64_t version, VersionBundle* out) {
  store::VersionReader reader;
  PLUMB_RETURN_IF_ERROR(store::VersionReader::Open(store, version, &reader));
  const store::VersionManifest& m = reader.manifest();
  out->version = version;
  out->created_ms = m.created_ms;
  out->dim = m.dim;
  out->events_seen = m.events_seen;
  out->objective = m.objective;
  out->target_group_shares = m.target_group_shares;
  PLUMB_RETURN_IF_ERROR(ItemMatrix::Create(m.num_items, m.dim, &out->items));
  PLUMB_RETURN_IF_ERROR(ItemMatrix::Create(m.num_users, m.dim, &out->users));
  PLUMB_RETURN_IF_ERROR(reader.ReadMatrix(
      store::MatrixKind::kItems, std::span<float>(out->items.data(), size_t{m.num_items} * m.dim)));
  PLUMB_RETURN_IF_ERROR(reader.ReadMatrix(
      store::MatrixKind::kUsers, std::span<float>(out->users.data(), size_t{m.num_users} * m.dim)));
  PLUMB_RETURN_IF_ERROR(store.ReadVersionDegrees(version, &out->item_degrees));
  if (out->item_degrees.size() != m.num_items) {
    return Status::Corruption("version " + std::to_string(version) + ": " +
                              std::to_string(out->item_degrees.size()) + " stored degrees for " +
                              std::to_string(m.num_items) + " items");
  }
  PLUMB_RETURN_IF_ERROR(reader.LoadIds(store::IdSpace::kItem, &out->item_ids));
  PLUMB_RETURN_IF_ERROR(reader.LoadIds(store::IdSpace::kUser, &out->user_ids));
  out->seen_offsets.assign(size_t{m.num_users} + 1, 0);
  out->seen_items.clear();
  PLUMB_RETURN_IF_ERROR(reader.ForEachInteraction([&](uint32_t user, uint32_t item) {
    out->seen_items.push_back(item);
    ++out->seen_offsets[user + 1];
  }));
  for (size_t u = 0; u < m.num_users; ++u) out->seen_offsets[u + 1] += out->seen_offsets[u];
  std::vector<store::WithdrawnItem> withdrawn;
  PLUMB_RETURN_IF_ERROR(store.ListWithdrawnItems("", 0, &withdrawn));
  out->withdrawn_items.clear();
  for (store::WithdrawnItem& w : withdrawn) out->withdrawn_items.push_back(std::move(w.item_id));
  return Status::Ok();
}

Status EncodeBundle(const VersionBundle& b, std::string* out) {
  const size_t num_items = b.items.rows(), num_users = b.users.rows();
  if (b.items.dim() != b.dim || (num_users > 0 && b.users.dim() != b.dim) ||
      b.item_ids.size() != num_items || b.user_ids.size() != num_users ||
      b.item_degrees.size() != num_items || b.seen_offsets.size() != num_users + 1 ||
      b.seen_offsets.back() != b.seen_items.size()) {
    return Status::InvalidArgument("version bundle parts disagree in size");
  }
  out->clear();
  size_t ids_bytes = 0;
  for (const std::string& id : b.item_ids) ids_bytes += 4 + id.size();
  for (const std::string& id : b.user_ids) ids_bytes += 4 + id.size();
  out->reserve(128 + (num_items + num_users) * b.dim * 4 + num_items * 4 + ids_bytes +
               (num_users + 1) * 8 + b.seen_items.size() * 4);
  out->append(kBundleMagic);
  Put<uint64_t>(out, b.version);
  Put<int64_t>(out, b.created_ms);
  Put<uint32_t>(out, b.dim);
  Put<uint32_t>(out, static_cast<uint32_t>(num_items));
  Put<uint32_t>(out, static_cast<uint32_t>(num_users));
  Put<uint64_t>(out, b.events_seen);
  PutStr(out, b.objective);
  Put<uint32_t>(out, static_cast<uint32_t>(b.target_group_shares.size()));
  PutArray(out, b.target_group_shares.data(), b.target_group_shares.size());
  PutArray(out, b.items.data(), num_items * b.dim);
  PutArray(out, b.users.data(), num_users * b.dim);
  PutArray(out, b.item_degrees.data(), num_items);
  for (const std::string& id : b.item_ids) PutStr(out, id);
  for (const std::string& id : b.user_ids) PutStr(out, id);
  PutArray(out, b.seen_offsets.data(), b.seen_offsets.size());
  Put<uint64_t>(out, b.seen_items.size());
  PutArray(out, b.seen_items.data(), b.seen_items.size());
  Put<uint32_t>(out, static_cast<uint32_t>(b.withdrawn_items.size()));
  for (const std::string& id : b.withdrawn_items) PutStr(out, id);
  Put<uint32_t>(out, Crc32(*out));
  return Status::Ok();
}

Status DecodeBundle(std::string_view bytes, VersionBundle* out) {
  if (bytes.size() < kBundleMagic.size() + 4 ||
      bytes.substr(0, kBundleMagic.size()) != kBundleMagic) {
    return Status::Corruption("not a version bundle (wrong magic)");
  }
  uint32_t stored_crc = 0;
  std::memcpy(&stored_crc, bytes.data() + bytes.size() - 4, 4);
  const std::string_view body = bytes.substr(0, bytes.size() - 4);
  if (Crc32(body) != stored_crc) return Status::Corruption("version bundle: CRC-32 mismatch");
  Reader r(body.substr(kBundleMagic.size()));
  uint32_t num_items = 0, num_users = 0, n = 0;
  PLUMB_RETURN_IF_ERROR(r.Get(&out->version, "the header"));
  PLUMB_RETURN_IF_ERROR(r.Get(&out->created_ms, "the header"));
  PLUMB_RETURN_IF_ERROR(r.Get(&out->dim, "the header"));
  PLUMB_RETURN_IF_ERROR(r.Get(&num_items, "the header"));
  PLUMB_RETURN_IF_ERROR(r.Get(&num_users, "the header"));
  PLUMB_RETURN_IF_ERROR(r.Get(&out->events_seen, "the header"));
  PLUMB_RETURN_IF_ERROR(r.GetStr(&out->objective, "the objective"));
  PLUMB_RETURN_IF_ERROR(r.Get(&n, "the target shares"));
  if (!r.Fits(n, 8))
    return Status::Corruption("version bundle: too few bytes for the target shares");
  out->target_group_shares.resize(n);
  PLUMB_RETURN_IF_ERROR(r.GetArray(out->target_group_shares.data(), n, "the target shares"));
  if (out->dim == 0) return Status::Corruption("version bundle: dim 0");
  const uint64_t item_values = uint64_t{num_items} * out->dim;
  const uint64_t user_values = uint64_t{num_users} * out->dim;
  if (!r.Fits(item_values, 4) || !r.Fits(item_values + user_values, 4)) {
    return Status::Corruption("version bundle: too few bytes for " + std::to_string(num_items) +
                              " items and " + std::to_string(num_users) + " users of dim " +
                              std::to_string(out->dim));
  }
  PLUMB_RETURN_IF_ERROR(ItemMatrix::Create(num_items, out->dim, &out->items));
  PLUMB_RETURN_IF_ERROR(ItemMatrix::Create(num_users, out->dim, &out->users));
  PLUMB_RETURN_IF_ERROR(r.GetArray(out->items.data(), item_values, "the item matrix"));
  PLUMB_RETURN_IF_ERROR(r.GetArray(out->users.data(), user_values, "the user matrix"));
  if (!r.Fits(num_items, 4)) return Status::Corruption("version bundle ends inside the degrees");
  out->item_degrees.resize(num_items);
  PLUMB_RETURN_IF_ERROR(r.GetArray(out->item_degrees.data(), num_items, "the degrees"));
  PLUMB_RETURN_IF_ERROR(GetIds(&r, num_items, &out->item_ids, "the item ids"));
  PLUMB_RETURN_IF_ERROR(GetIds(&r, num_users, &out->user_ids, "the user ids"));
  if (!r.Fits(uint64_t{num_users} + 1, 8)) {
    return Status::Corruption("version bundle ends inside the seen-item offsets");
  }
  out->seen_offsets.resize(size_t{num_users} + 1);
  PLUMB_RETURN_IF_ERROR(
      r.GetArray(out->seen_offsets.data(), out->seen_offsets.size(), "the seen-item offsets"));
  uint64_t num_seen = 0;
  PLUMB_RETURN_IF_ERROR(r.Get(&num_seen, "the seen items"));
  if (!r.Fits(num_seen, 4)) return Status::Corruption("version bundle ends inside the seen items");
  out->seen_items.resize(num_seen);
  PLUMB_RETURN_IF_ERROR(r.GetArray(out->seen_items.data(), num_seen, "the seen items"));
  if (out->seen_offsets.front() != 0 || out->seen_offsets.back() != num_seen) {
    return Status::Corruption("version bundle: seen-item offsets do not span the seen items");
  }
  PLUMB_RETURN_IF_ERROR(r.Get(&n, "the withdrawn items"));
  PLUMB_RETURN_IF_ERROR(GetIds(&r, n, &out->withdrawn_items, "the withdrawn items"));
  if (r.left() != 0) {
    return Status::Corruption("version bundle: " + std::to_string(r.left()) +
                              " bytes left over after the withdrawn items");
  }
  return Status::Ok();
}

std::vector<std::string> CutIntoChunks(uint64_t version, std::string_view bundle,
                                       size_t max_chunk_payload) {
  std::vector<std::string> messages;
  const size_t step = std::max<size_t>(1, max_chunk_payload);
  uint32_t index = 0;
  for (size_t at = 0; at < bundle.size(); at += step, ++index) {
    const std::string_view payload = bundle.substr(at, step);
    std::string m;
    m.reserve(kChunkHeaderBytes + payload.size());
    m.append(kChunkMagic);
    Put<uint64_t>(&m, version);
    Put<uint32_t>(&m, index);
    Put<uint32_t>(&m, static_cast<uint32_t>(payload.size()));
    Put<uint32_t>(&m, Crc32(payload));
    m.append(payload);
    messages.push_back(std::move(m));
  }
  std::string t;
  t.append(kTrailerMagic);
  Put<uint64_t>(&t, version);
  Put<uint32_t>(&t, index);
  Put<uint64_t>(&t, bundle.size());
  Put<uint32_t>(&t, Crc32(bundle));
  Put<uint32_t>(&t, Crc32(t));
  messages.push_back(std::move(t));
  return messages;
}

bool IsTrailer(std::string_view message) {
  return message.substr(0, kTrailerMagic.size()) == kTrailerMagic;
}

Status ParseTrailer(std::string_view message, Trailer* out) {
  if (message.size() != kTrailerBytes || !IsTrailer(message)) {
    return Status::Corruption("not a version trailer (" + std::to_string(message.size()) +
                              " bytes)");
  }
  uint32_t crc = 0;
  std::memcpy(&crc, message.data() + 28, 4);
  if (Crc32(message.substr(0, 28)) != crc) {
    return Status::Corruption("version trailer: CRC-32 mismatch");
  }
  std::memcpy(&out->version, message.data() + 4, 8);
  std::memcpy(&out->chunks, message.data() + 12, 4);
  std::memcpy(&out->total_bytes, message.data() + 16, 8);
  std::memcpy(&out->crc32, message.data() + 24, 4);
  return Status::Ok();
}

void BundleAssembler::Reserve(uint64_t bytes) {
  bytes_.reserve(static_cast<size_t>(std::min(bytes, max_total_bytes_)));
}

Status BundleAssembler::Add(std::string_view m) {
  const std::string where =
      "version " + std::to_string(version_) + ", chunk " + std::to_string(next_index_) + ": ";
  if (m.size() < kChunkHeaderBytes || m.substr(0, kChunkMagic.size()) != kChunkMagic) {
    return Status::Corruption(where + "not a chunk (" + std::to_string(m.size()) + " bytes)");
  }
  uint64_t version = 0;
  uint32_t index = 0, length = 0, crc = 0;
  std::memcpy(&version, m.data() + 4, 8);
  std::memcpy(&index, m.data() + 12, 4);
  std::memcpy(&length, m.data() + 16, 4);
  std::memcpy(&crc, m.data() + 20, 4);
  if (version != version_) {
    return Status::Corruption(where + "carries version " + std::to_string(version));
  }
  if (index != next_index_) {
    return Status::Corruption(where + "arrived as chunk " + std::to_string(index) +
                              " (out of order, repeated or missing)");
  }
  const std::string_view payload = m.substr(kChunkHeaderBytes);
  if (payload.size() != length) {
    return Status::Corruption(where + std::to_string(payload.size()) +
                              " payload bytes, header says " + std::to_string(length));
  }
  if (Crc32(payload) != crc) return Status::Corruption(where + "CRC-32 mismatch");
  if (bytes_.size() + payload.size() > max_total_bytes_) {
    return Status::Corruption(where + "more than " + std::to_string(max_total_bytes_) +
                              " bytes in all");
  }
  bytes_.append(payload);
  ++next_index_;
  return Status::Ok();
}

Status BundleAssembler::Finish(std::string_view trailer_message, std::string* bundle) {
  const std::string where = "version " + std::to_string(version_) + ": ";
  Trailer t;
  Status s = ParseTrailer(trailer_message, &t);
  if (!s.ok()) return Status::Corruption(where + s.message());
  if (t.version != version_) {
    return Status::Corruption(where + "trailer names version " + std::to_string(t.version));
  }
  if (t.chunks != next_index_) {
    return Status::Corruption(where + std::to_string(next_index_) +
                              " chunks received, trailer says " + std::to_string(t.chunks));
  }
  if (t.total_bytes != bytes_.size()) {
    return Status::Corruption(where + std::to_string(bytes_.size()) +
                              " bytes received, trailer says " + std::to_string(t.total_bytes));
  }
  if (Crc32(bytes_) != t.crc32) return Status::Corruption(where + "total CRC-32 mismatch");
  *bundle = std::move(bytes_);
  bytes_.clear();
  return Status::Ok();
}

}  // namespace plumb::replica
