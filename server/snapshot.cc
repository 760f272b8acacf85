#include "server/snapshot.h"

#include <algorithm>
#include <bit>
#include <chrono>
#include <cstring>
#include <future>
#include <system_error>

#include "core/clock.h"
#include "core/scan.h"
#include "server/fold_in.h"
#include "store/store.h"
#include "store/version_reader.h"

namespace plumb::server {

namespace {

// Index of the first non-finite value, or size when all are finite. Tests the exponent
// bits rather than calling std::isfinite so that the compiler can vectorise the common
// all-finite case; this runs over every value of a version (256 MB for a million items).
size_t FirstNonFinite(const float* values, size_t size) {
  constexpr uint32_t kExponent = 0x7f800000u;
  constexpr size_t kChunk = 4096;
  for (size_t start = 0; start < size; start += kChunk) {
    const size_t end = std::min(size, start + kChunk);
    uint32_t bad = 0;
    for (size_t i = start; i < end; ++i) {
      uint32_t bits;
      std::memcpy(&bits, &values[i], sizeof(bits));
      bad |= static_cast<uint32_t>((bits & kExponent) == kExponent);
    }
    if (bad != 0) {
      for (size_t i = start; i < end; ++i) {
        uint32_t bits;
        std::memcpy(&bits, &values[i], sizeof(bits));
        if ((bits & kExponent) == kExponent) return i;
      }
    }
  }
  return size;
}

Status CheckMatrix(const ItemMatrix& m, const char* name) {
  const size_t bad = FirstNonFinite(m.data(), m.rows() * m.dim());
  if (bad != m.rows() * m.dim()) {
    return Status::Corruption(std::string(name) + " matrix has a non-finite value at row " +
                              std::to_string(bad / m.dim()) + ", column " +
                              std::to_string(bad % m.dim()));
  }
  return Status::Ok();
}

Status CheckSeen(const SnapshotParts& parts, size_t num_users, size_t num_items,
                 const std::string& where) {
  if (parts.seen_offsets.empty()) return Status::Ok();
  if (parts.seen_offsets.size() != num_users + 1 || parts.seen_offsets[0] != 0 ||
      parts.seen_offsets.back() != parts.seen_items.size()) {
    return Status::Corruption(where + "seen-item offsets do not match the user count");
  }
  for (size_t u = 0; u < num_users; ++u) {
    const uint64_t begin = parts.seen_offsets[u], end = parts.seen_offsets[u + 1];
    if (end < begin) return Status::Corruption(where + "seen-item offsets decrease");
    for (uint64_t j = begin; j < end; ++j) {
      if (parts.seen_items[j] >= num_items ||
          (j > begin && parts.seen_items[j] <= parts.seen_items[j - 1])) {
        return Status::Corruption(where + "seen items of user index " + std::to_string(u) +
                                  " are not ascending item indexes");
      }
    }
  }
  return Status::Ok();
}

// Runs `side` on a helper thread while `main` runs on this one, and returns side's error if
// any, else main's. Snapshots are built on the catch-up thread, so the helper takes at most
// one more core for the length of a load. Runs both here if no thread can be started.
template <typename F, typename G>
Status RunBoth(F&& side, G&& main) {
  std::future<Status> helper;
  try {
    helper = std::async(std::launch::async, [&side] { return side(); });
  } catch (const std::system_error&) {
    Status a = side();
    Status b = main();
    return a.ok() ? b : a;
  }
  Status b = main();
  Status a = helper.get();
  return a.ok() ? b : a;
}

}  // namespace

Status Snapshot::Build(SnapshotParts parts, std::shared_ptr<const Snapshot>* out) {
  const std::string where = "version " + std::to_string(parts.version) + ": ";
  const size_t dim = parts.items.dim();
  if (dim == 0) return Status::Corruption(where + "dim is 0");
  if (parts.users.rows() > 0 && parts.users.dim() != dim) {
    return Status::Corruption(where + "user matrix has dim " + std::to_string(parts.users.dim()) +
                              ", item matrix " + std::to_string(dim));
  }
  if (parts.items.rows() != parts.item_ids.size()) {
    return Status::Corruption(where + std::to_string(parts.items.rows()) + " item rows but " +
                              std::to_string(parts.item_ids.size()) + " item ids");
  }
  if (parts.users.rows() != parts.user_ids.size()) {
    return Status::Corruption(where + std::to_string(parts.users.rows()) + " user rows but " +
                              std::to_string(parts.user_ids.size()) + " user ids");
  }
  const size_t num_items = parts.items.rows();
  const size_t num_users = parts.users.rows();
  if (num_items >= UINT32_MAX || num_users >= UINT32_MAX) {
    return Status::Corruption(where + "too many rows for 32-bit indexes");
  }
  if (parts.item_degrees.empty()) parts.item_degrees.assign(num_items, 0);
  if (parts.item_degrees.size() != num_items) {
    return Status::Corruption(where + std::to_string(parts.item_degrees.size()) +
                              " item degrees for " + std::to_string(num_items) + " items");
  }
  if (parts.seen_offsets.empty() && !parts.seen_items.empty()) {
    return Status::Corruption(where + "seen items without offsets");
  }

  // Item side and user side are independent; on a million items each is a few hundred ms.
  std::shared_ptr<Snapshot> snap(new Snapshot());
  Status s = RunBoth(
      [&]() -> Status {
        PLUMB_RETURN_IF_ERROR(CheckMatrix(parts.items, "item"));
        Status ids = IdMap::Build(parts.item_ids, &snap->item_index_);
        if (!ids.ok()) return Status::Corruption(where + "item ids: " + ids.message());
        // The id list is copied into the map; free it now to keep the swap's peak low.
        std::vector<std::string>().swap(parts.item_ids);
        snap->item_norms_.resize(num_items);
        PLUMB_RETURN_IF_ERROR(row_norms(parts.items.view(), snap->item_norms_));
        snap->item_gram_.resize(dim * dim);
        PLUMB_RETURN_IF_ERROR(plumb::server::item_gram(parts.items.view(), snap->item_gram_));
        snap->items_by_degree_.resize(num_items);
        for (uint32_t i = 0; i < num_items; ++i) snap->items_by_degree_[i] = i;
        const std::vector<uint64_t>& degrees = parts.item_degrees;
        std::sort(snap->items_by_degree_.begin(), snap->items_by_degree_.end(),
                  [&degrees](uint32_t a, uint32_t b) {
                    return degrees[a] > degrees[b] || (degrees[a] == degrees[b] && a < b);
                  });
        return Status::Ok();
      },
      [&]() -> Status {
        // Here rather than with the items: this side has less to do.
        PLUMB_RETURN_IF_ERROR(QuantizedItems::Build(parts.items.view(), &snap->item_codes_));
        if (num_users > 0) PLUMB_RETURN_IF_ERROR(CheckMatrix(parts.users, "user"));
        PLUMB_RETURN_IF_ERROR(CheckSeen(parts, num_users, num_items, where));
        Status ids = IdMap::Build(parts.user_ids, &snap->user_index_);
        if (!ids.ok()) return Status::Corruption(where + "user ids: " + ids.message());
        std::vector<std::string>().swap(parts.user_ids);
        return Status::Ok();
      });
  PLUMB_RETURN_IF_ERROR(s);

  snap->version_ = parts.version;
  snap->created_ms_ = parts.created_ms;
  snap->items_ = std::move(parts.items);
  snap->users_ = std::move(parts.users);
  snap->item_degrees_ = std::move(parts.item_degrees);
  snap->seen_offsets_ = std::move(parts.seen_offsets);
  snap->seen_items_ = std::move(parts.seen_items);
  snap->target_group_shares_ = std::move(parts.target_group_shares);
  if (parts.approx.min_items > 0 && num_items >= parts.approx.min_items) {
    // Both from the same rows; the cosine one waits for the dot one (the build threads are
    // already the configured share of the machine).
    Status built = ApproxIndex::Build(snap->items_.view(), ApproxIndex::Metric::kDot,
                                      parts.approx.index, &snap->dot_index_);
    if (built.ok() && parts.approx.similar_items) {
      ApproxIndexOptions cosine = parts.approx.index;
      cosine.search_breadth = parts.approx.similar_search_breadth;
      built = ApproxIndex::Build(snap->items_.view(), ApproxIndex::Metric::kCosine, cosine,
                                 &snap->cosine_index_);
    }
    if (!built.ok()) {
      // The rows were checked above, so what remains is a lack of memory.
      return Status::ResourceExhausted(where + built.message());
    }
    snap->max_overfetch_ = parts.approx.max_overfetch;
  }
  snap->loaded_ms_ = NowMs();
  *out = std::move(snap);
  return Status::Ok();
}

double Snapshot::approx_build_seconds() const {
  return (dot_index_ ? dot_index_->build_seconds() : 0.0) +
         (cosine_index_ ? cosine_index_->build_seconds() : 0.0);
}

size_t Snapshot::memory_bytes() const {
  return (dot_index_ ? dot_index_->memory_bytes() : 0) +
         (cosine_index_ ? cosine_index_->memory_bytes() : 0) +
         (items_.rows() + users_.rows()) * items_.dim() * sizeof(float) + item_codes_.bytes() +
         item_norms_.capacity() * sizeof(float) + item_gram_.capacity() * sizeof(double) +
         item_index_.memory_bytes() + user_index_.memory_bytes() +
         item_degrees_.capacity() * sizeof(uint64_t) +
         items_by_degree_.capacity() * sizeof(uint32_t) +
         seen_offsets_.capacity() * sizeof(uint64_t) + seen_items_.capacity() * sizeof(uint32_t);
}

Status LoadSnapshot(const store::Store& store, uint64_t version,
                    std::shared_ptr<const Snapshot>* out, const ApproxServingOptions& approx) {
  store::VersionReader reader;
  PLUMB_RETURN_IF_ERROR(store::VersionReader::Open(store, version, &reader));
  const store::VersionManifest& manifest = reader.manifest();
  const std::string where = "version " + std::to_string(version) + ": ";

  SnapshotParts parts;
  parts.version = version;
  parts.created_ms = manifest.created_ms;
  parts.target_group_shares = manifest.target_group_shares;
  PLUMB_RETURN_IF_ERROR(ItemMatrix::Create(manifest.num_items, manifest.dim, &parts.items));
  PLUMB_RETURN_IF_ERROR(ItemMatrix::Create(manifest.num_users, manifest.dim, &parts.users));
  // ReadMatrix checks every block against the manifest's rows and dim (Corruption when a
  // block is missing or wrongly sized), so the matrices below have the manifest's shape.
  // The item matrix, the largest read, overlaps with everything else.
  const uint32_t num_users = manifest.num_users;
  Status s = RunBoth(
      [&]() -> Status {
        return reader.ReadMatrix(
            store::MatrixKind::kItems,
            std::span<float>(parts.items.data(), parts.items.rows() * parts.items.dim()));
      },
      [&]() -> Status {
        PLUMB_RETURN_IF_ERROR(reader.ReadMatrix(
            store::MatrixKind::kUsers,
            std::span<float>(parts.users.data(), parts.users.rows() * parts.users.dim())));
        std::vector<uint32_t> degrees;
        PLUMB_RETURN_IF_ERROR(reader.ReadItemDegrees(&degrees));
        parts.item_degrees.assign(degrees.begin(), degrees.end());
        PLUMB_RETURN_IF_ERROR(reader.LoadIds(store::IdSpace::kItem, &parts.item_ids));
        PLUMB_RETURN_IF_ERROR(reader.LoadIds(store::IdSpace::kUser, &parts.user_ids));

        // ForEachInteraction yields the version's pairs ordered by user then item, so
        // appending builds the compressed rows directly; the order is checked as it goes.
        parts.seen_offsets.assign(static_cast<size_t>(num_users) + 1, 0);
        parts.seen_items.reserve(manifest.num_interactions);
        uint64_t last_pair = 0;
        bool ordered = true;
        PLUMB_RETURN_IF_ERROR(reader.ForEachInteraction([&](uint32_t user, uint32_t item) {
          const uint64_t pair = (static_cast<uint64_t>(user) << 32 | item) + 1;
          ordered = ordered && pair > last_pair;
          last_pair = pair;
          parts.seen_items.push_back(item);
          ++parts.seen_offsets[user + 1];
        }));
        if (!ordered) {
          return Status::Corruption(where + "interactions not ordered by user then item");
        }
        for (size_t u = 0; u < num_users; ++u) parts.seen_offsets[u + 1] += parts.seen_offsets[u];
        parts.seen_items.shrink_to_fit();
        return Status::Ok();
      });
  PLUMB_RETURN_IF_ERROR(s);

  parts.approx = approx;
  return Snapshot::Build(std::move(parts), out);
}

}  // namespace plumb::server
