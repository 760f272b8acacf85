// IdMap: the two-way mapping between external ids (strings chosen by product backends) and
// the dense indexes of one embedding version.
//
// Built once per snapshot and then only read. The ids live in one contiguous character
// buffer and the hash table is a flat array of indexes (open addressing, linear probing), so
// a million ids cost about 20 bytes each plus their characters and building one allocates
// three arrays instead of a node per id. Lookups allocate nothing.
#pragma once

#include <cstdint>
#include <optional>
#include <string>
#include <string_view>
#include <vector>

#include "core/status.h"

namespace plumb::server {

class IdMap {
 public:
  IdMap() = default;
  IdMap(IdMap&&) noexcept = default;
  IdMap& operator=(IdMap&&) noexcept = default;
  IdMap(const IdMap&) = delete;
  IdMap& operator=(const IdMap&) = delete;

  // Builds the map for ids[0..n): ids[i] gets index i. Corruption (naming the first
  // offender) if an id is empty or appears twice; *out is unchanged then.
  static Status Build(const std::vector<std::string>& ids, IdMap* out);

  // Number of ids.
  uint32_t size() const {
    return static_cast<uint32_t>(offsets_.empty() ? 0 : offsets_.size() - 1);
  }

  // The index of `id`, or nullopt when the map does not hold it. Thread-safe.
  std::optional<uint32_t> Find(std::string_view id) const;

  // The external id of index i (i < size()). The view points into this map and lives as
  // long as it does. Thread-safe.
  std::string_view id(uint32_t i) const {
    return std::string_view(chars_.data() + offsets_[i], offsets_[i + 1] - offsets_[i]);
  }

  // Bytes held, for logging snapshot sizes.
  size_t memory_bytes() const {
    return chars_.capacity() + offsets_.capacity() * sizeof(uint64_t) +
           slots_.capacity() * sizeof(uint32_t);
  }

 private:
  std::vector<char> chars_;        // all ids, concatenated
  std::vector<uint64_t> offsets_;  // id i is chars_[offsets_[i], offsets_[i+1])
  std::vector<uint32_t> slots_;    // index + 1, or 0 for an empty slot; size is a power of 2
};

}  // namespace plumb::server
