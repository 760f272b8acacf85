// VersionBundle: one stored embedding version, self-contained, as plumb-train ships it to
// remote serving replicas (README "Beyond one machine"), and its wire format: the bundle's
// bytes cut into checksummed chunks plus a trailer.
//
// Bundle encoding (all integers and floats little-endian; "str" is a u32 byte length and
// the bytes):
//   "PLUMBVB1"                        8 bytes, magic and format version
//   u64 version, i64 created_ms       the manifest's
//   u32 dim, u32 num_items, u32 num_users
//   u64 events_seen                   the log sequence the version was trained up to
//   str objective
//   u32 n, f64[n]                     the validation target's popularity-group shares
//   f32[num_items * dim]              item matrix, row-major
//   f32[num_users * dim]              user matrix, row-major
//   u32[num_items]                    training degree of each item
//   str[num_items], str[num_users]    external ids, by row
//   u64[num_users + 1]                seen-items offsets (compressed rows; 0 .. num_seen)
//   u64 num_seen, u32[num_seen]       seen items, ascending per user
//   u32 n, str[n]                     the items withdrawn when the version was shipped
//   u32 crc32                         zlib's CRC-32 of every byte before it
//
// Chunk message (one NATS message each, at most max_chunk_payload payload bytes):
//   "PVC1", u64 version, u32 index (0-based), u32 length, u32 crc32(payload), payload
// Trailer message (the last message of a version):
//   "PVT1", u64 version, u32 chunks, u64 total bytes, u32 crc32(bundle), u32 crc32 of the
//   28 bytes before it
//
// Everything here is pure computation on bytes, thread-compatible.
#pragma once

#include <cstdint>
#include <string>
#include <string_view>
#include <vector>

#include "core/aligned.h"
#include "core/status.h"

namespace plumb::store {
class Store;
}

namespace plumb::replica {

struct VersionBundle {
  uint64_t version = 0;
  int64_t created_ms = 0;
  uint32_t dim = 0;
  uint64_t events_seen = 0;
  std::string objective;
  std::vector<double> target_group_shares;
  ItemMatrix items;  // num_items x dim
  ItemMatrix users;  // num_users x dim
  std::vector<uint32_t> item_degrees;
  std::vector<std::string> item_ids, user_ids;
  std::vector<uint64_t> seen_offsets;  // num_users + 1 entries
  std::vector<uint32_t> seen_items;
  std::vector<std::string> withdrawn_items;
};

// Reads version `version` of `store` (manifest, matrices, degrees, its ids and interactions)
// and the store's withdrawn items now. NotFound for a version not kept; Corruption / IoError
// from the store. Thread-safe with respect to the store.
Status ReadVersionBundle(const store::Store& store, uint64_t version, VersionBundle* out);

// The bundle's bytes (format above). InvalidArgument when the parts disagree in size.
Status EncodeBundle(const VersionBundle& bundle, std::string* out);

// Parses bytes made by EncodeBundle. Corruption (naming what is wrong; *out unspecified)
// when the magic, the final CRC-32, a length or a count is wrong, or bytes are missing or
// left over. Checks no more than the format: Snapshot::Build checks the contents.
Status DecodeBundle(std::string_view bytes, VersionBundle* out);

// The bytes of NATS messages that carry a bundle: chunks of at most max_chunk_payload
// payload bytes (> 0), then the trailer.
std::vector<std::string> CutIntoChunks(uint64_t version, std::string_view bundle,
                                       size_t max_chunk_payload);

// Fixed bytes a chunk adds to its payload.
inline constexpr size_t kChunkHeaderBytes = 24;

// True when `message` is a trailer (by its magic; ParseTrailer checks the rest).
bool IsTrailer(std::string_view message);

struct Trailer {
  uint64_t version = 0;
  uint32_t chunks = 0;
  uint64_t total_bytes = 0;
  uint32_t crc32 = 0;
};
// Corruption for a message that is not an intact trailer.
Status ParseTrailer(std::string_view message, Trailer* out);

// Puts a version's messages back together, in order. Add each chunk message, then Finish
// with the trailer. Every error is Corruption naming the damage: a wrong magic or version,
// a chunk out of order or repeated, a length that disagrees with the message, a chunk's
// CRC-32, more than max_total_bytes, and in Finish a missing chunk, a wrong total size or
// total CRC-32.
class BundleAssembler {
 public:
  BundleAssembler(uint64_t version, uint64_t max_total_bytes)
      : version_(version), max_total_bytes_(max_total_bytes) {}
  // Reserves room for `bytes` (capped at max_total_bytes), when the total is known before
  // the chunks (a receiver may read the trailer first): saves the copies of a growing buffer.
  void Reserve(uint64_t bytes);
  Status Add(std::string_view chunk_message);
  // On OK, *bundle holds the verified bundle bytes.
  Status Finish(std::string_view trailer_message, std::string* bundle);

 private:
  uint64_t version_;
  uint64_t max_total_bytes_;
  uint32_t next_index_ = 0;
  std::string bytes_;
};

// zlib's CRC-32 of `bytes` (the ISO-HDLC polynomial of zlib, PNG and gzip).
uint32_t Crc32(std::string_view bytes);

}  // namespace plumb::replica
