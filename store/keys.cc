#include "store/keys.h"

#include <bit>
#include <cstring>

namespace plumb::store::keys {

static_assert(std::endian::native == std::endian::little,
              "stored values are little-endian; a big-endian port must byte-swap them");

void PutBigEndian32(std::string* out, uint32_t v) {
  for (int shift = 24; shift >= 0; shift -= 8)
    out->push_back(static_cast<char>((v >> shift) & 0xff));
}

void PutBigEndian64(std::string* out, uint64_t v) {
  for (int shift = 56; shift >= 0; shift -= 8)
    out->push_back(static_cast<char>((v >> shift) & 0xff));
}

uint32_t ReadBigEndian32(const char* p) {
  uint32_t v = 0;
  for (int i = 0; i < 4; ++i) v = (v << 8) | static_cast<unsigned char>(p[i]);
  return v;
}

uint64_t ReadBigEndian64(const char* p) {
  uint64_t v = 0;
  for (int i = 0; i < 8; ++i) v = (v << 8) | static_cast<unsigned char>(p[i]);
  return v;
}

std::string Fixed32(uint32_t v) {
  std::string out(sizeof v, '\0');
  std::memcpy(out.data(), &v, sizeof v);
  return out;
}

std::string Fixed64(uint64_t v) {
  std::string out(sizeof v, '\0');
  std::memcpy(out.data(), &v, sizeof v);
  return out;
}

std::optional<uint32_t> ParseFixed32(std::string_view in) {
  uint32_t v = 0;
  if (in.size() != sizeof v) return std::nullopt;
  std::memcpy(&v, in.data(), sizeof v);
  return v;
}

std::optional<uint64_t> ParseFixed64(std::string_view in) {
  uint64_t v = 0;
  if (in.size() != sizeof v) return std::nullopt;
  std::memcpy(&v, in.data(), sizeof v);
  return v;
}

std::string EventKey(uint64_t seq) {
  std::string key;
  PutBigEndian64(&key, seq);
  return key;
}

std::optional<uint64_t> ParseEventKey(std::string_view key) {
  if (key.size() != 8) return std::nullopt;
  return ReadBigEndian64(key.data());
}

std::string EventIdRecord(uint64_t seq, int64_t received_ms) {
  return Fixed64(seq) + Fixed64(static_cast<uint64_t>(received_ms));
}

bool ParseEventIdRecord(std::string_view value, uint64_t* seq, int64_t* received_ms) {
  if (value.size() != 16) return false;
  *seq = *ParseFixed64(value.substr(0, 8));
  *received_ms = static_cast<int64_t>(*ParseFixed64(value.substr(8, 8)));
  return true;
}

bool WithinDedupWindow(int64_t received_ms, int64_t now_ms, int64_t window_ms) {
  return window_ms == 0 || now_ms - received_ms <= window_ms;
}

std::string IdByExternalKey(IdSpace space, std::string_view external) {
  std::string key;
  key.reserve(2 + external.size());
  key.push_back(static_cast<char>(space));
  key.push_back('x');
  key.append(external);
  return key;
}

std::string ExternalByIdKey(IdSpace space, uint32_t index) {
  std::string key = ExternalByIdPrefix(space);
  PutBigEndian32(&key, index);
  return key;
}

std::string ExternalByIdPrefix(IdSpace space) {
  std::string key;
  key.push_back(static_cast<char>(space));
  key.push_back('n');
  return key;
}

std::string InteractionKey(uint32_t user, uint32_t item) {
  std::string key;
  PutBigEndian32(&key, user);
  PutBigEndian32(&key, item);
  return key;
}

std::string InteractionPrefix(uint32_t user) {
  std::string key;
  PutBigEndian32(&key, user);
  return key;
}

std::string DegreeKey(uint32_t item) {
  std::string key;
  PutBigEndian32(&key, item);
  return key;
}

std::string ManifestPrefix() { return "m"; }

std::string ManifestKey(uint64_t version) {
  std::string key = ManifestPrefix();
  PutBigEndian64(&key, version);
  return key;
}

std::optional<uint64_t> ParseManifestKey(std::string_view key) {
  if (key.size() != 9 || key[0] != 'm') return std::nullopt;
  return ReadBigEndian64(key.data() + 1);
}

std::string BlockPrefix(uint64_t version) {
  std::string key = "b";
  PutBigEndian64(&key, version);
  return key;
}

std::string BlockKey(uint64_t version, MatrixKind kind, uint32_t block) {
  std::string key = BlockPrefix(version);
  key.push_back(static_cast<char>(kind));
  PutBigEndian32(&key, block);
  return key;
}

std::string VersionDegreesPrefix(uint64_t version) {
  std::string key = "d";
  PutBigEndian64(&key, version);
  return key;
}

std::string VersionDegreesKey(uint64_t version, uint32_t block) {
  std::string key = VersionDegreesPrefix(version);
  PutBigEndian32(&key, block);
  return key;
}

std::string_view MatrixName(MatrixKind kind) {
  return kind == MatrixKind::kUsers ? "users" : "items";
}

std::string_view SpaceName(IdSpace space) { return space == IdSpace::kUser ? "user" : "item"; }

}  // namespace plumb::store::keys
