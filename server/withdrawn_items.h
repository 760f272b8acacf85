// WithdrawnItems: the items withdrawn from serving (ModelControl SetItemAvailability), as
// plumb-serve applies them to one snapshot. Immutable once built: the catch-up loop builds a
// new one when the store's withdrawn set changes (its generation moves) or a new version is
// swapped in, and publishes it through the SnapshotHolder; a request reads the current one
// once, beside its snapshot.
//
// The set is kept by external id (an item may be withdrawn before a version knows it) and, for
// the snapshot it was built against, as a bitmap over that snapshot's item rows, which the
// scans take directly (core/scan.h Exclusions). A request whose snapshot is another version
// (the instant after a swap, before the loop rebuilt the set) resolves the ids instead.
//
// Thread safety: const methods of a built set may be called from any thread.
#pragma once

#include <cstdint>
#include <span>
#include <string>
#include <string_view>
#include <vector>

#include "server/snapshot.h"

namespace plumb::server {

class WithdrawnItems {
 public:
  // `ids` in any order (repeats are dropped); `snap` may be null (no bitmap).
  WithdrawnItems(std::vector<std::string> ids, uint64_t generation, const Snapshot* snap);
  WithdrawnItems(const WithdrawnItems&) = delete;
  WithdrawnItems& operator=(const WithdrawnItems&) = delete;

  uint64_t generation() const { return generation_; }
  size_t size() const { return ids_.size(); }
  bool empty() const { return ids_.empty(); }
  bool Contains(std::string_view item_id) const;
  // The ids, sorted.
  const std::vector<std::string>& ids() const { return ids_; }

  // True when the bitmap is for snapshot version `version` (and so for its rows).
  bool BuiltFor(uint64_t version) const { return has_bitmap_ && version_ == version; }
  // Bit r set: row r of the snapshot BuiltFor names is withdrawn.
  std::span<const uint64_t> bitmap() const { return bitmap_; }
  bool ContainsRow(uint32_t row) const {
    return row / 64 < bitmap_.size() && ((bitmap_[row / 64] >> (row % 64)) & 1) != 0;
  }
  // The rows of `snap` that are withdrawn, ascending (for a snapshot the bitmap is not for).
  void ResolveRows(const Snapshot& snap, std::vector<uint32_t>* rows) const;

 private:
  std::vector<std::string> ids_;  // sorted, distinct
  uint64_t generation_;
  bool has_bitmap_ = false;
  uint64_t version_ = 0;
  std::vector<uint64_t> bitmap_;
};

}  // namespace plumb::server
