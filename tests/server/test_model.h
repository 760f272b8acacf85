// TestModel: a small embedding version held in plain vectors, for the server suites. It can
// become a Snapshot directly (SnapshotParts) or be written to a primary store as a version.
// Ids follow the project's demo scenario: members of a tool-lending library ("member-k")
// borrowing tools ("tool-k").
#pragma once

#include <gtest/gtest.h>

#include <cstdlib>
#include <filesystem>
#include <memory>
#include <random>
#include <string>
#include <vector>

#include "server/snapshot.h"
#include "store/store.h"
#include "tests/common/scratch_dir.h"

namespace plumb::server::testing {

struct TestModel {
  uint32_t num_users = 0, num_items = 0, dim = 0;
  std::vector<float> users;  // num_users x dim, row-major
  std::vector<float> items;  // num_items x dim
  std::vector<std::string> user_ids, item_ids;
  std::vector<std::vector<uint32_t>> seen;  // ascending item indexes per user
  std::vector<uint32_t> degrees;            // per item

  std::span<const float> user(uint32_t u) const { return {users.data() + size_t{u} * dim, dim}; }
  std::span<const float> item(uint32_t i) const { return {items.data() + size_t{i} * dim, dim}; }
};

// Random model. With small_integers, every value is one of -2..2, so dot products are exact
// in float32 and ties are frequent; otherwise values are Gaussian. Each user has
// `seen_per_user` distinct seen items; degrees count them.
inline TestModel RandomModel(uint32_t num_users, uint32_t num_items, uint32_t dim,
                             uint32_t seen_per_user, uint64_t seed, bool small_integers) {
  TestModel m;
  m.num_users = num_users;
  m.num_items = num_items;
  m.dim = dim;
  std::mt19937_64 rng(seed);
  std::normal_distribution<float> gauss(0.0f, 1.0f);
  std::uniform_int_distribution<int> small(-2, 2);
  auto draw = [&] { return small_integers ? static_cast<float>(small(rng)) : gauss(rng); };
  m.users.resize(size_t{num_users} * dim);
  m.items.resize(size_t{num_items} * dim);
  for (float& v : m.users) v = draw();
  for (float& v : m.items) v = draw();
  for (uint32_t u = 0; u < num_users; ++u) m.user_ids.push_back("member-" + std::to_string(u));
  for (uint32_t i = 0; i < num_items; ++i) m.item_ids.push_back("tool-" + std::to_string(i));
  m.degrees.assign(num_items, 0);
  m.seen.resize(num_users);
  std::uniform_int_distribution<uint32_t> pick(0, num_items - 1);
  for (uint32_t u = 0; u < num_users; ++u) {
    std::vector<uint32_t>& s = m.seen[u];
    while (s.size() < std::min(seen_per_user, num_items)) {
      const uint32_t i = pick(rng);
      if (std::find(s.begin(), s.end(), i) == s.end()) s.push_back(i);
    }
    std::sort(s.begin(), s.end());
    for (uint32_t i : s) ++m.degrees[i];
  }
  return m;
}

inline SnapshotParts ToParts(const TestModel& m, uint64_t version) {
  SnapshotParts p;
  p.version = version;
  p.created_ms = 1'700'000'000'000;
  p.items = ItemMatrix(m.num_items, m.dim);
  p.users = ItemMatrix(m.num_users, m.dim);
  std::copy(m.items.begin(), m.items.end(), p.items.data());
  std::copy(m.users.begin(), m.users.end(), p.users.data());
  p.item_ids = m.item_ids;
  p.user_ids = m.user_ids;
  p.item_degrees.assign(m.degrees.begin(), m.degrees.end());
  p.seen_offsets.push_back(0);
  for (const auto& s : m.seen) {
    p.seen_items.insert(p.seen_items.end(), s.begin(), s.end());
    p.seen_offsets.push_back(p.seen_items.size());
  }
  return p;
}

inline std::shared_ptr<const Snapshot> BuildSnapshot(const TestModel& m, uint64_t version,
                                                     const ApproxServingOptions& approx = {}) {
  std::shared_ptr<const Snapshot> snap;
  SnapshotParts parts = ToParts(m, version);
  parts.approx = approx;
  Status s = Snapshot::Build(std::move(parts), &snap);
  EXPECT_TRUE(s.ok()) << s.ToString();
  return snap;
}

// Writes `m` as a new version to a primary store. Ids and interactions the store does not
// hold yet are added in the same commit (the model's ids must extend the dictionary).
// With activate, the version becomes the active one.
inline Status CommitModel(store::Store* primary, const TestModel& m, bool activate,
                          uint64_t* version) {
  store::StateChange change;
  for (uint32_t u = primary->IdCount(store::IdSpace::kUser); u < m.num_users; ++u)
    change.new_users.emplace_back(u, m.user_ids[u]);
  const uint32_t known_items = primary->IdCount(store::IdSpace::kItem);
  for (uint32_t i = known_items; i < m.num_items; ++i)
    change.new_items.emplace_back(i, m.item_ids[i]);
  for (uint32_t u = 0; u < m.num_users; ++u)
    for (uint32_t i : m.seen[u]) change.new_interactions.emplace_back(u, i);
  for (uint32_t i = 0; i < m.num_items; ++i) change.item_degrees.emplace_back(i, m.degrees[i]);
  store::VersionWrite write;
  write.manifest.objective = "cpr";
  write.manifest.num_users = m.num_users;
  write.manifest.num_items = m.num_items;
  write.manifest.dim = m.dim;
  write.manifest.created_ms = 1'700'000'000'000;
  write.users = {m.users.data(), m.num_users, m.dim};
  write.items = {m.items.data(), m.num_items, m.dim};
  write.item_degrees = m.degrees;
  change.version = &write;
  change.activate_published = activate;
  return primary->Commit(change, version);
}

using ::plumb::testing::ScratchDir;  // tests/common/scratch_dir.h

}  // namespace plumb::server::testing
