// Child process of crash_test.cc: opens a store as the primary and writes the lending
// workload (lending_workload.h) until it is killed. After every AppendEvents that returns
// OK it prints "ack <last sequence>" and after every Commit "pub <version>", each line
// flushed at once, so that the parent knows exactly what was acknowledged before the kill.
//
// Usage: store_append_child <store dir> <seed>
// Exit codes (it normally never exits; the parent kills it): 2 usage, 3 store error,
// 4 the store broke a promise (wrong sequence numbers, a duplicate not recognised).
#include <cstdio>
#include <cstdlib>
#include <random>
#include <string>
#include <vector>

#include "store/store.h"
#include "tests/store/lending_workload.h"

namespace {

using plumb::Status;
using namespace plumb::store;
using namespace plumb::store::testing;

[[noreturn]] void Fail(int code, const std::string& what) {
  std::fprintf(stderr, "append_child: %s\n", what.c_str());
  std::exit(code);
}

void Check(const Status& s, const char* what) {
  if (!s.ok()) Fail(3, std::string(what) + ": " + s.ToString());
}

void Say(const char* tag, uint64_t value) {
  std::printf("%s %llu\n", tag, static_cast<unsigned long long>(value));
  std::fflush(stdout);
}

// Folds the log after the cursor into ids, interactions and degrees, and publishes a
// version in the same Commit.
void Publish(Store& store, std::vector<uint32_t>& degrees, bool activate) {
  uint64_t cursor = 0;
  Check(store.GetCursor(&cursor), "GetCursor");
  const uint64_t last = store.LastSequence();
  StateChange change;
  uint32_t users = store.IdCount(IdSpace::kUser);
  uint32_t items = store.IdCount(IdSpace::kItem);
  std::vector<Event> events;
  for (uint64_t after = cursor; after < last;) {
    Check(store.ReadEvents(after, 500, &events), "ReadEvents");
    if (events.empty()) Fail(4, "log ends before its last sequence");
    for (const Event& e : events) {
      const uint32_t u = MemberOf(e.seq);
      const uint32_t i = ToolOf(e.seq);
      // Ids enter the dictionary in index order, so member u needs members < u first.
      while (users <= u) {
        change.new_users.emplace_back(users, MemberId(users));
        ++users;
      }
      while (items <= i) {
        change.new_items.emplace_back(items, ToolId(items));
        ++items;
      }
      change.new_interactions.emplace_back(u, i);
      if (degrees.size() < items) degrees.resize(items, 0);
      ++degrees[i];
    }
    after = events.back().seq;
  }
  degrees.resize(items, 0);
  for (uint32_t i = 0; i < items; ++i) change.item_degrees.emplace_back(i, degrees[i]);
  change.cursor = last;

  std::vector<float> user_rows(size_t{users} * kDim);
  std::vector<float> item_rows(size_t{items} * kDim);
  for (uint32_t r = 0; r < users; ++r)
    for (uint32_t c = 0; c < kDim; ++c)
      user_rows[size_t{r} * kDim + c] = EmbeddingValue(last, MatrixKind::kUsers, r, c);
  for (uint32_t r = 0; r < items; ++r)
    for (uint32_t c = 0; c < kDim; ++c)
      item_rows[size_t{r} * kDim + c] = EmbeddingValue(last, MatrixKind::kItems, r, c);
  VersionWrite version;
  version.manifest.objective = "cpr";
  version.manifest.events_seen = last;
  version.manifest.num_users = users;
  version.manifest.num_items = items;
  version.manifest.dim = kDim;
  version.users = {user_rows.data(), users, kDim};
  version.items = {item_rows.data(), items, kDim};
  version.item_degrees = degrees;
  change.version = &version;
  change.activate_published = activate;
  uint64_t published = 0;
  Check(store.Commit(change, &published), "Commit");
  Say("pub", published);
}

}  // namespace

int main(int argc, char** argv) {
  if (argc != 3) Fail(2, "usage: store_append_child <store dir> <seed>");
  StoreOptions options;
  options.keep_versions = kKeepVersions;
  options.keep_versions_for_ms = 0;  // by count only: the crash test bounds the kept versions
  options.rows_per_block = kRowsPerBlock;
  std::unique_ptr<Store> store;
  Check(Store::OpenPrimary(argv[1], options, &store), "OpenPrimary");
  std::mt19937_64 rng(std::strtoull(argv[2], nullptr, 10));

  std::vector<uint32_t> degrees;
  Check(store->LoadItemDegrees(&degrees), "LoadItemDegrees");
  uint64_t next = store->LastSequence() + 1;
  std::vector<EventInput> previous;
  for (uint64_t round = 1;; ++round) {
    const uint64_t n = 1 + rng() % 40;
    std::vector<EventInput> batch;
    for (uint64_t k = 0; k < n; ++k) batch.push_back(LoanFor(next + k));
    // A retry of the previous batch's first event and a copy within this batch: neither
    // may take a sequence number.
    size_t expected_duplicates = 1;
    batch.push_back(batch[rng() % batch.size()]);
    if (!previous.empty()) {
      batch.insert(batch.begin() + static_cast<long>(rng() % batch.size()), previous.front());
      ++expected_duplicates;
    }
    AppendResult result;
    Check(store->AppendEvents(batch, &result), "AppendEvents");
    if (result.last_seq != next + n - 1 || result.appended != n ||
        result.duplicates != expected_duplicates) {
      Fail(4, "append of " + std::to_string(n) + " loans from " + std::to_string(next) +
                  " gave last_seq " + std::to_string(result.last_seq) + ", " +
                  std::to_string(result.duplicates) + " duplicates");
    }
    Say("ack", result.last_seq);
    next += n;
    previous.assign(batch.begin(), batch.begin() + 1);
    if (round % 6 == 0) Publish(*store, degrees, (round / 6) % 2 == 1);
  }
}
