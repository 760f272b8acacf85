// Snapshot: everything plumb-serve needs to answer requests from one embedding version,
// immutable once built.
//
// A request takes a std::shared_ptr<const Snapshot> once (see SnapshotHolder) and uses it to
// the end, so a version swap never changes the data under a running request, and a snapshot
// is freed when the last request holding it finishes. Building one reads and validates a
// whole version and takes seconds for a million items: it happens on the catch-up thread,
// never on the request path.
#pragma once

#include <cstdint>
#include <memory>
#include <optional>
#include <span>
#include <string>
#include <string_view>
#include <vector>

#include "core/aligned.h"
#include "core/approx_index.h"
#include "core/scan.h"
#include "core/status.h"
#include "server/id_map.h"

namespace plumb::store {
class Store;
}

namespace plumb::server {

// When a snapshot also gets approximate indexes (core/approx_index.h) for Recommend and
// SimilarItems, and how they are built.
struct ApproxServingOptions {
  // Catalogues of at least this many items get the indexes; 0 = never (exact scans only).
  uint32_t min_items = 0;
  ApproxIndexOptions index;
  // Recommend and SimilarItems ask the index for count + (excluded items, at most this many)
  // candidates and drop the excluded ones; when fewer than count survive, the call falls
  // back to the exact scan.
  uint32_t max_overfetch = 2000;
  // Also the cosine index for SimilarItems; false leaves SimilarItems to the exact scan and
  // halves the indexes' build time and memory (used by bench_catalogue at 10M items).
  bool similar_items = true;
  // The cosine index's search breadth (index.search_breadth is the dot index's): SimilarItems
  // needs a wider search for the same recall (bench_catalogue at 1M trained items: recall@20
  // 0.90 at 128, 0.94 at 256, 0.97 at 512 for items drawn by their interactions).
  uint32_t similar_search_breadth = 320;
};

// The raw material of a Snapshot. LoadSnapshot() fills it from a Store; tests and
// benchmarks fill it directly.
struct SnapshotParts {
  uint64_t version = 0;
  int64_t created_ms = 0;             // when the trainer made the version, ms since the Unix epoch
  ItemMatrix items;                   // num_items x dim, row i = item index i
  ItemMatrix users;                   // num_users x dim, row u = user index u
  std::vector<std::string> item_ids;  // external id of each item index (num_items entries)
  std::vector<std::string> user_ids;  // external id of each user index (num_users entries)
  // Training degree of each item (num_items entries), or empty for "all zero".
  std::vector<uint64_t> item_degrees;
  // The items each user interacted with, compressed sparse rows: user u's items are
  // seen_items[seen_offsets[u] .. seen_offsets[u+1]), ascending and < num_items.
  // seen_offsets is empty (nobody has seen anything) or has num_users + 1 entries.
  std::vector<uint64_t> seen_offsets;
  std::vector<uint32_t> seen_items;
  // The version's debiased validation split's share per popularity group (tail first), the
  // target the served exposure is compared with; empty when the trainer did not measure it.
  std::vector<double> target_group_shares;
  // Whether to build approximate indexes (built after the exact structures, before the
  // snapshot exists: never on the request path).
  ApproxServingOptions approx;
};

class Snapshot {
 public:
  // Validates `parts` and, when they are consistent, moves them into a new snapshot.
  // Corruption (the message says what is wrong; nothing is built) when: dim is 0, the two
  // matrices differ in dim, a matrix's row count differs from its id list, a value is not
  // finite, an id is empty or repeated, the degrees or the seen lists are malformed.
  static Status Build(SnapshotParts parts, std::shared_ptr<const Snapshot>* out);

  Snapshot(const Snapshot&) = delete;
  Snapshot& operator=(const Snapshot&) = delete;

  // All accessors below are const and thread-safe; spans and views point into the snapshot
  // and live as long as it does.

  uint64_t version() const { return version_; }
  int64_t created_ms() const { return created_ms_; }
  // When this process finished building the snapshot, ms since the Unix epoch.
  int64_t loaded_ms() const { return loaded_ms_; }

  uint32_t num_items() const { return static_cast<uint32_t>(items_.rows()); }
  uint32_t num_users() const { return static_cast<uint32_t>(users_.rows()); }
  uint32_t dim() const { return static_cast<uint32_t>(items_.dim()); }

  MatrixView items() const { return items_.view(); }
  std::span<const float> item_vector(uint32_t item) const { return items_.row(item); }
  std::span<const float> user_vector(uint32_t user) const { return users_.row(user); }
  // The int8 copy of the item matrix that Recommend's pruned exact scan reads first.
  const QuantizedItems& item_codes() const { return item_codes_; }
  // Euclidean norm of each item vector, for cosine similarity.
  std::span<const float> item_norms() const { return item_norms_; }
  // QᵀQ of the item matrix (dim x dim, row-major), for fold-in of unknown users.
  std::span<const double> item_gram() const { return item_gram_; }

  std::optional<uint32_t> FindUser(std::string_view id) const { return user_index_.Find(id); }
  std::optional<uint32_t> FindItem(std::string_view id) const { return item_index_.Find(id); }
  std::string_view user_id(uint32_t user) const { return user_index_.id(user); }
  std::string_view item_id(uint32_t item) const { return item_index_.id(item); }

  // The items user `user` interacted with, ascending.
  std::span<const uint32_t> seen_items(uint32_t user) const {
    if (seen_offsets_.empty()) return {};
    return std::span<const uint32_t>(seen_items_)
        .subspan(seen_offsets_[user], seen_offsets_[user + 1] - seen_offsets_[user]);
  }

  // Training degree (popularity) of each item.
  std::span<const uint64_t> item_degrees() const { return item_degrees_; }
  // Every item index, highest degree first, ties by smaller index: the order of the
  // UNKNOWN_USER_MOST_INTERACTED fallback.
  std::span<const uint32_t> items_by_degree() const { return items_by_degree_; }

  // The validation target's popularity-group shares (SnapshotParts); may be empty.
  std::span<const double> target_group_shares() const { return target_group_shares_; }

  // The approximate indexes, or null when the catalogue is below ApproxServingOptions'
  // min_items: by dot product (Recommend) and by cosine (SimilarItems).
  const ApproxIndex* dot_index() const { return dot_index_.get(); }
  const ApproxIndex* cosine_index() const { return cosine_index_.get(); }
  uint32_t max_overfetch() const { return max_overfetch_; }
  // Seconds spent building both indexes (0 without them).
  double approx_build_seconds() const;

  // Approximate heap bytes held, for logs and the memory benchmark.
  size_t memory_bytes() const;

 private:
  Snapshot() = default;

  uint64_t version_ = 0;
  int64_t created_ms_ = 0;
  int64_t loaded_ms_ = 0;
  ItemMatrix items_;
  ItemMatrix users_;
  QuantizedItems item_codes_;
  std::vector<float> item_norms_;
  std::vector<double> item_gram_;
  IdMap item_index_;
  IdMap user_index_;
  std::vector<uint64_t> item_degrees_;
  std::vector<uint32_t> items_by_degree_;
  std::vector<uint64_t> seen_offsets_;
  std::vector<uint32_t> seen_items_;
  std::vector<double> target_group_shares_;
  std::unique_ptr<const ApproxIndex> dot_index_;
  std::unique_ptr<const ApproxIndex> cosine_index_;
  uint32_t max_overfetch_ = 0;
};

// Reads version `version` from `store` (manifest, both matrices, degrees, the id
// dictionaries up to the version's sizes, and the interaction sets restricted to its users
// and items) and builds its snapshot.
// Every block is read with RocksDB's checksum verification, so a version with a damaged
// block is refused before it could be swapped in.
// Errors: NotFound if the version is not kept; Corruption for missing, wrongly sized or
// damaged (checksum) blocks, dimensions that disagree with the manifest, non-finite values; IoError
// from the store; ResourceExhausted when the matrices cannot be allocated. *out is unchanged on
// error. Thread-safe with respect to the store (see store.h); allocates the whole snapshot.
//
// The interaction sets in the store are live (they keep growing after the version was
// trained), so "seen" includes interactions newer than the version. For exclusion that is
// what a caller wants: an item the user took yesterday should not be recommended today.
// `approx` says whether the snapshot also gets approximate indexes (SnapshotParts::approx).
Status LoadSnapshot(const store::Store& store, uint64_t version,
                    std::shared_ptr<const Snapshot>* out, const ApproxServingOptions& approx = {});

}  // namespace plumb::server
