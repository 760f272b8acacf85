// Conversion between plumb's in-memory events and manifests and the protobuf records stored
// as RocksDB values (proto/plumb/v1/storage.proto). Internal to store/.
//
// Decoding never trusts the bytes: a value that does not parse, or that parses into
// something the store never writes (an event without a user, a manifest whose version
// differs from its key), is reported as false so that the caller can return Corruption.
#pragma once

#include <cstdint>
#include <string>
#include <string_view>

#include "store/store.h"

namespace plumb::store::records {

// received_ms must be > 0: its presence is what tells a whole record from a truncated one
// (protobuf writes fields in number order and received_ms is the last).
std::string EncodeEvent(const EventInput& event, int64_t received_ms);

// Fills `out` (seq included). On false, `why` says what is wrong.
bool DecodeEvent(std::string_view value, uint64_t seq, Event* out, std::string* why);

std::string EncodeManifest(const VersionManifest& manifest, uint32_t rows_per_block);

// `version` is the version named by the key the value was read under.
bool DecodeManifest(std::string_view value, uint64_t version, VersionManifest* out,
                    uint32_t* rows_per_block, std::string* why);

// pair_history values (StoredPairHistory). Decode: false for a value that does not parse or
// has a count of 0.
std::string EncodePairHistory(const PairHistory& record);
bool DecodePairHistory(std::string_view value, PairHistory* out);

// meta "plumb.retention" (StoredRetention); the fields LogStats carries.
std::string EncodeRetention(const LogStats& totals);
bool DecodeRetention(std::string_view value, LogStats* totals);

// meta "plumb.availability" (StoredAvailability).
std::string EncodeAvailability(uint64_t generation, uint64_t withdrawn);
bool DecodeAvailability(std::string_view value, uint64_t* generation, uint64_t* withdrawn);

}  // namespace plumb::store::records
