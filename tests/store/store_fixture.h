// StoreFixture: a test fixture owning a scratch directory and a primary store in it, with
// the small builders the suites share.
#pragma once

#include <gtest/gtest.h>

#include <memory>
#include <string>
#include <vector>

#include "store/store.h"
#include "tests/common/scratch_dir.h"

namespace plumb::store::testing {

using ::plumb::testing::ScratchDir;

// A version's data kept alive for Commit(): the views of `write` point into the vectors.
struct OwnedVersion {
  std::vector<float> users;
  std::vector<float> items;
  std::vector<uint32_t> degrees;
  VersionWrite write;
};

// Rows * dim floats, distinct per (tag, row, col), exact in float32.
inline std::vector<float> PatternMatrix(uint32_t rows, uint32_t dim, float tag) {
  std::vector<float> m(size_t{rows} * dim);
  for (size_t k = 0; k < m.size(); ++k) m[k] = tag * 1000.0f + static_cast<float>(k) * 0.25f;
  return m;
}

inline std::unique_ptr<OwnedVersion> MakeVersion(uint32_t users, uint32_t items, uint32_t dim,
                                                 float tag) {
  auto v = std::make_unique<OwnedVersion>();
  v->users = PatternMatrix(users, dim, tag);
  v->items = PatternMatrix(items, dim, tag + 0.5f);
  v->degrees.resize(items);
  for (uint32_t i = 0; i < items; ++i) v->degrees[i] = i * 3 + static_cast<uint32_t>(tag);
  v->write.manifest.objective = "cpr";
  v->write.manifest.num_users = users;
  v->write.manifest.num_items = items;
  v->write.manifest.dim = dim;
  v->write.users = {v->users.data(), users, dim};
  v->write.items = {v->items.data(), items, dim};
  v->write.item_degrees = v->degrees;
  return v;
}

// Options for the suites: no fsync per write. These suites test the store's logic, and the
// machine they run on is shared; what sync=false gives up (surviving a machine crash) no
// in-process test could observe anyway. crash_test.cc runs its writer with sync on.
inline StoreOptions TestOptions() {
  StoreOptions options;
  options.sync = false;
  return options;
}

class StoreFixture : public ::testing::Test {
 protected:
  void SetUp() override {
    dir_ = scratch_.Sub("store");
    Open();
  }

  void Open(const StoreOptions& options = TestOptions()) {
    options_ = options;
    store_.reset();
    Status s = Store::OpenPrimary(dir_, options_, &store_);
    ASSERT_TRUE(s.ok()) << s.ToString();
  }
  void Reopen() { Open(options_); }
  void Close() { store_.reset(); }

  // Adds `users` members and `items` tools to the dictionaries ("member-k", "tool-k").
  void AddIds(uint32_t users, uint32_t items) {
    StateChange change;
    const uint32_t u0 = store_->IdCount(IdSpace::kUser);
    const uint32_t i0 = store_->IdCount(IdSpace::kItem);
    for (uint32_t k = u0; k < u0 + users; ++k)
      change.new_users.emplace_back(k, "member-" + std::to_string(k));
    for (uint32_t k = i0; k < i0 + items; ++k)
      change.new_items.emplace_back(k, "tool-" + std::to_string(k));
    Status s = store_->Commit(change);
    ASSERT_TRUE(s.ok()) << s.ToString();
  }

  // The kept version numbers, newest first.
  std::vector<uint64_t> Listed() {
    std::vector<VersionManifest> versions;
    EXPECT_TRUE(store_->ListVersions(&versions).ok());
    std::vector<uint64_t> out;
    for (const auto& m : versions) out.push_back(m.version);
    return out;
  }

  // Publishes a version of the current dictionary sizes; returns its number.
  uint64_t Publish(uint32_t dim, float tag, bool activate) {
    auto v =
        MakeVersion(store_->IdCount(IdSpace::kUser), store_->IdCount(IdSpace::kItem), dim, tag);
    StateChange change;
    change.version = &v->write;
    change.activate_published = activate;
    uint64_t published = 0;
    Status s = store_->Commit(change, &published);
    EXPECT_TRUE(s.ok()) << s.ToString();
    return published;
  }

  // Reopens the store with blocks of 4 rows, adds 6 members and 10 tools (item blocks of
  // 4, 4 and 2 rows), appends 5 loans and publishes version 1 (dim 3, tag 1) as active.
  void OpenWithFirstVersion() {
    StoreOptions options = TestOptions();
    options.rows_per_block = 4;
    Open(options);
    AddIds(6, 10);
    AppendResult r;
    ASSERT_TRUE(store_->AppendEvents(Loans(5, 0), &r).ok());
    ASSERT_EQ(Publish(3, 1.0f, true), 1u);
  }

  static std::vector<EventInput> Loans(int n, int first, bool with_ids = true) {
    std::vector<EventInput> out;
    for (int k = first; k < first + n; ++k) {
      EventInput e;
      e.user_id = "member-" + std::to_string(k % 7);
      e.item_id = "tool-" + std::to_string(k % 11);
      e.timestamp_ms = 1'700'000'000'000 + k;
      if (with_ids) e.event_id = "loan-" + std::to_string(k);
      e.weight = 0.5f + static_cast<float>(k % 4);
      out.push_back(e);
    }
    return out;
  }

  ScratchDir scratch_;
  std::string dir_;
  StoreOptions options_;
  std::unique_ptr<Store> store_;
};

}  // namespace plumb::store::testing
