#include "trainer/interactions.h"

#include <algorithm>
#include <string>

namespace plumb::trainer {

namespace {

Status CheckIndex(uint32_t user, uint32_t item) {
  if (user >= kMaxIndex || item >= kMaxIndex) {
    return Status::InvalidArgument("interaction index out of range: user " + std::to_string(user) +
                                   ", item " + std::to_string(item) + " (limit " +
                                   std::to_string(kMaxIndex) + ")");
  }
  return Status::Ok();
}

}  // namespace

bool Interactions::ContainsSorted(std::span<const uint32_t> sorted, uint32_t x) {
  // Branch-light lower bound: the lists are short and the branch outcome is random, so a
  // conditional move beats std::binary_search's mispredictions.
  const uint32_t* base = sorted.data();
  size_t n = sorted.size();
  if (n == 0) return false;
  while (n > 1) {
    const size_t half = n / 2;
    base = (base[half] <= x) ? base + half : base;
    n -= half;
  }
  return *base == x;
}

Status Interactions::Build(std::span<const Pair> pairs, uint32_t num_users, uint32_t num_items,
                           Interactions* out) {
  Interactions d;
  PLUMB_RETURN_IF_ERROR(d.EnsureShape(num_users, num_items));
  uint32_t max_user = 0, max_item = 0;
  for (const Pair& p : pairs) {
    PLUMB_RETURN_IF_ERROR(CheckIndex(p.user, p.item));
    max_user = std::max(max_user, p.user + 1);
    max_item = std::max(max_item, p.item + 1);
  }
  PLUMB_RETURN_IF_ERROR(d.EnsureShape(max_user, max_item));
  // Stable sort of positions by (user, item) finds duplicates in one pass; the first
  // occurrence (smallest position) survives.
  std::vector<uint32_t> order(pairs.size());
  for (size_t i = 0; i < order.size(); ++i) order[i] = static_cast<uint32_t>(i);
  std::stable_sort(order.begin(), order.end(), [&](uint32_t a, uint32_t b) {
    const Pair& x = pairs[a];
    const Pair& y = pairs[b];
    return x.user != y.user ? x.user < y.user : x.item < y.item;
  });
  std::vector<char> keep(pairs.size(), 0);
  for (size_t r = 0; r < order.size(); ++r) {
    if (r > 0 && pairs[order[r]] == pairs[order[r - 1]]) continue;
    keep[order[r]] = 1;
    const Pair& p = pairs[order[r]];
    d.user_items_[p.user].push_back(p.item);  // ascending, by the sort
  }
  d.pairs_.reserve(order.size());
  for (size_t i = 0; i < pairs.size(); ++i) {
    if (!keep[i]) continue;
    d.pairs_.push_back(pairs[i]);
    ++d.item_degrees_[pairs[i].item];
  }
  for (const auto& items : d.user_items_) d.active_users_ += items.empty() ? 0 : 1;
  for (uint32_t deg : d.item_degrees_) d.active_items_ += deg == 0 ? 0 : 1;
  *out = std::move(d);
  return Status::Ok();
}

Status Interactions::EnsureShape(uint32_t num_users, uint32_t num_items) {
  if (num_users > kMaxIndex || num_items > kMaxIndex) {
    return Status::InvalidArgument("interaction shape too large: " + std::to_string(num_users) +
                                   " users x " + std::to_string(num_items) + " items");
  }
  if (num_users > user_items_.size()) user_items_.resize(num_users);
  if (num_items > item_degrees_.size()) item_degrees_.resize(num_items, 0);
  return Status::Ok();
}

Status Interactions::Add(uint32_t user, uint32_t item, bool* added) {
  if (added != nullptr) *added = false;
  PLUMB_RETURN_IF_ERROR(CheckIndex(user, item));
  PLUMB_RETURN_IF_ERROR(EnsureShape(user + 1, item + 1));
  std::vector<uint32_t>& items = user_items_[user];
  auto it = std::lower_bound(items.begin(), items.end(), item);
  if (it != items.end() && *it == item) return Status::Ok();
  if (items.empty()) ++active_users_;
  if (item_degrees_[item] == 0) ++active_items_;
  items.insert(it, item);
  ++item_degrees_[item];
  pairs_.push_back(Pair{user, item});
  if (added != nullptr) *added = true;
  return Status::Ok();
}

Status Interactions::AddAll(std::span<const Pair> pairs, std::vector<uint64_t>* new_indexes) {
  for (const Pair& p : pairs) {
    bool added = false;
    PLUMB_RETURN_IF_ERROR(Add(p.user, p.item, &added));
    if (added && new_indexes != nullptr) new_indexes->push_back(pairs_.size() - 1);
  }
  return Status::Ok();
}

}  // namespace plumb::trainer
