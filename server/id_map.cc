#include "server/id_map.h"

#include <functional>

namespace plumb::server {

namespace {

size_t HashId(std::string_view id) { return std::hash<std::string_view>{}(id); }

}  // namespace

Status IdMap::Build(const std::vector<std::string>& ids, IdMap* out) {
  if (ids.size() >= UINT32_MAX) return Status::Corruption("too many ids for 32-bit indexes");
  IdMap map;
  size_t total = 0;
  for (const std::string& id : ids) total += id.size();
  map.chars_.reserve(total);
  map.offsets_.reserve(ids.size() + 1);
  map.offsets_.push_back(0);
  for (const std::string& id : ids) {
    map.chars_.insert(map.chars_.end(), id.begin(), id.end());
    map.offsets_.push_back(map.chars_.size());
  }
  // Load factor at most 1/2 keeps linear-probe chains short for hits and misses alike.
  size_t capacity = 16;
  while (capacity < 2 * ids.size()) capacity *= 2;
  map.slots_.assign(capacity, 0);
  const size_t mask = capacity - 1;
  for (uint32_t i = 0; i < ids.size(); ++i) {
    std::string_view id = map.id(i);
    if (id.empty()) return Status::Corruption("empty external id at index " + std::to_string(i));
    size_t slot = HashId(id) & mask;
    while (map.slots_[slot] != 0) {
      if (map.id(map.slots_[slot] - 1) == id) {
        return Status::Corruption("external id '" + std::string(id) + "' appears at indexes " +
                                  std::to_string(map.slots_[slot] - 1) + " and " +
                                  std::to_string(i));
      }
      slot = (slot + 1) & mask;
    }
    map.slots_[slot] = i + 1;
  }
  *out = std::move(map);
  return Status::Ok();
}

std::optional<uint32_t> IdMap::Find(std::string_view id) const {
  if (slots_.empty()) return std::nullopt;
  const size_t mask = slots_.size() - 1;
  size_t slot = HashId(id) & mask;
  while (slots_[slot] != 0) {
    const uint32_t index = slots_[slot] - 1;
    if (this->id(index) == id) return index;
    slot = (slot + 1) & mask;
  }
  return std::nullopt;
}

}  // namespace plumb::server
