// The byte layout of plumb's RocksDB keys and small fixed-width values (see store.h for the
// column families). Internal to store/ and its tests; nothing here knows RocksDB.
//
// Keys hold integers big-endian so that RocksDB's bytewise order is numeric order.
// Values hold integers and float32 arrays little-endian (the byte order of every machine
// plumb targets; store.cc refuses to compile elsewhere rather than write another layout).
#pragma once

#include <cstdint>
#include <optional>
#include <string>
#include <string_view>

#include "store/store.h"

namespace plumb::store::keys {

// Appends / reads big-endian integers. Read* return nullopt when `in` has the wrong size.
void PutBigEndian32(std::string* out, uint32_t v);
void PutBigEndian64(std::string* out, uint64_t v);
uint32_t ReadBigEndian32(const char* p);
uint64_t ReadBigEndian64(const char* p);

// Little-endian fixed-width values.
std::string Fixed32(uint32_t v);
std::string Fixed64(uint64_t v);
std::optional<uint32_t> ParseFixed32(std::string_view in);
std::optional<uint64_t> ParseFixed64(std::string_view in);

// events: big-endian sequence.
std::string EventKey(uint64_t seq);
std::optional<uint64_t> ParseEventKey(std::string_view key);

// event_ids: the client's event id itself. The value is the sequence of the first copy
// and its receive time.
std::string EventIdRecord(uint64_t seq, int64_t received_ms);
bool ParseEventIdRecord(std::string_view value, uint64_t* seq, int64_t* received_ms);
// Whether a copy received at received_ms still makes a new copy a duplicate at now_ms.
// window_ms 0 means forever. AppendEvents and the expiry compaction filter share it.
bool WithinDedupWindow(int64_t received_ms, int64_t now_ms, int64_t window_ms);

// ids: space + 'x' + external id -> Fixed32 index; space + 'n' + big-endian index -> external.
std::string IdByExternalKey(IdSpace space, std::string_view external);
std::string ExternalByIdKey(IdSpace space, uint32_t index);
// Prefix of all ExternalByIdKey keys of one space.
std::string ExternalByIdPrefix(IdSpace space);

// interactions and pair_history: big-endian user + big-endian item.
std::string InteractionKey(uint32_t user, uint32_t item);
std::string InteractionPrefix(uint32_t user);

// degrees: big-endian item index -> Fixed32 degree.
std::string DegreeKey(uint32_t item);

// models.
std::string ManifestKey(uint64_t version);
std::string BlockKey(uint64_t version, MatrixKind kind, uint32_t block);
std::string VersionDegreesKey(uint64_t version, uint32_t block);
// Every key of one version shares one of these prefixes.
std::string ManifestPrefix();                        // 'm'
std::string BlockPrefix(uint64_t version);           // 'b' + version
std::string VersionDegreesPrefix(uint64_t version);  // 'd' + version
// The version named by a ManifestKey; nullopt for any other key.
std::optional<uint64_t> ParseManifestKey(std::string_view key);

// meta: names reserved for the store itself. Caller-set names may not start with "plumb.".
inline constexpr std::string_view kReservedMetaPrefix = "plumb.";
inline constexpr std::string_view kMetaActiveVersion = "plumb.active_version";
inline constexpr std::string_view kMetaCursor = "plumb.cursor";
inline constexpr std::string_view kMetaNextVersion = "plumb.next_version";
inline constexpr std::string_view kMetaLastSequence = "plumb.last_sequence";
// The pinned versions: big-endian uint64 version numbers, ascending, concatenated.
inline constexpr std::string_view kMetaPinnedVersions = "plumb.pinned_versions";
// The canary (Store::GetCanary): Fixed64 version, Fixed32 share in basis points, Fixed64
// started_ms; absent when no canary runs.
inline constexpr std::string_view kMetaCanary = "plumb.canary";
// Stored bytes (key + value) of every event ever appended, Fixed64 (written with each append).
inline constexpr std::string_view kMetaLogBytes = "plumb.log_bytes";
// Retention totals: StoredRetention (store/retention.cc).
inline constexpr std::string_view kMetaRetention = "plumb.retention";
// The withdrawn items (store/availability.cc): StoredAvailability, and one value per item under
// the prefix (+ external item id -> Fixed64 ms of the withdrawal).
inline constexpr std::string_view kMetaAvailability = "plumb.availability";
inline constexpr std::string_view kMetaWithdrawnPrefix = "plumb.withdrawn/";

// Column family names, as created on disk.
inline constexpr const char* kEventsFamily = "events";
inline constexpr const char* kEventIdsFamily = "event_ids";
inline constexpr const char* kIdsFamily = "ids";
inline constexpr const char* kInteractionsFamily = "interactions";
inline constexpr const char* kDegreesFamily = "degrees";
inline constexpr const char* kModelsFamily = "models";
inline constexpr const char* kMetaFamily = "meta";
// Added after the first release: a follower opens it when present (store/retention.cc).
inline constexpr const char* kPairHistoryFamily = "pair_history";

// "users" / "items" for messages.
std::string_view MatrixName(MatrixKind kind);
std::string_view SpaceName(IdSpace space);

}  // namespace plumb::store::keys
