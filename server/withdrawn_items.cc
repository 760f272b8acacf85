#include "server/withdrawn_items.h"

#include <algorithm>

namespace plumb::server {

WithdrawnItems::WithdrawnItems(std::vector<std::string> ids, uint64_t generation,
                               const Snapshot* snap)
    : ids_(std::move(ids)), generation_(generation) {
  std::sort(ids_.begin(), ids_.end());
  ids_.erase(std::unique(ids_.begin(), ids_.end()), ids_.end());
  if (snap == nullptr) return;
  has_bitmap_ = true;
  version_ = snap->version();
  bitmap_.assign((static_cast<size_t>(snap->num_items()) + 63) / 64, 0);
  for (const std::string& id : ids_) {
    if (std::optional<uint32_t> row = snap->FindItem(id)) {
      bitmap_[*row / 64] |= uint64_t{1} << (*row % 64);
    }
  }
}

bool WithdrawnItems::Contains(std::string_view item_id) const {
  return std::binary_search(ids_.begin(), ids_.end(), item_id,
                            [](std::string_view a, std::string_view b) { return a < b; });
}

void WithdrawnItems::ResolveRows(const Snapshot& snap, std::vector<uint32_t>* rows) const {
  rows->clear();
  for (const std::string& id : ids_) {
    if (std::optional<uint32_t> row = snap.FindItem(id)) rows->push_back(*row);
  }
  std::sort(rows->begin(), rows->end());
}

}  // namespace plumb::server
