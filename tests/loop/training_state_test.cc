#include "trainer/online/training_state.h"

#include <gtest/gtest.h>
#include <unistd.h>

#include <cmath>
#include <filesystem>

namespace plumb::online {
namespace {

namespace fs = std::filesystem;

TEST(IsHeldOut, ShareMatchesTheFractionAndIsStable) {
  const int n = 100000;
  const double f = 0.1;
  int held = 0;
  for (int u = 0; u < n; ++u) {
    const std::string user = "m" + std::to_string(u % 1000), item = "t" + std::to_string(u / 1000);
    const bool h = IsHeldOut(user, item, f);
    EXPECT_EQ(h, IsHeldOut(user, item, f));
    held += h;
  }
  // Binomial(n, f): standard deviation sqrt(n f (1-f)) ≈ 95; allow 5 of them.
  EXPECT_NEAR(held, n * f, 5 * std::sqrt(n * f * (1 - f)));
  EXPECT_FALSE(IsHeldOut("a", "b", 0.0));
  EXPECT_TRUE(IsHeldOut("a", "b", 1.0));
}

store::Event Ev(uint64_t seq, std::string u, std::string i) {
  store::Event e;
  e.seq = seq;
  e.user_id = std::move(u);
  e.item_id = std::move(i);
  e.timestamp_ms = 1;
  return e;
}

TEST(TrainingState, ApplyAssignsDenseIdsAndReportsNewPairsOnce) {
  TrainingState s(0.0);
  std::vector<uint64_t> fresh;
  ASSERT_TRUE(s.Apply(Ev(1, "ann", "saw"), &fresh).ok());
  ASSERT_TRUE(s.Apply(Ev(2, "bob", "saw"), &fresh).ok());
  ASSERT_TRUE(s.Apply(Ev(3, "ann", "saw"), &fresh).ok());  // repeat of a pair
  ASSERT_TRUE(s.Apply(Ev(4, "ann", "drill"), &fresh).ok());
  EXPECT_EQ(fresh, (std::vector<uint64_t>{0, 1, 2}));
  EXPECT_EQ(s.users().size(), 2u);
  EXPECT_EQ(s.items().size(), 2u);
  EXPECT_EQ(s.train().item_degree(0), 2u);  // "saw": ann and bob
  store::StateChange c;
  s.CollectChanges(&c);
  EXPECT_EQ(c.new_users.size(), 2u);
  EXPECT_EQ(c.new_items.size(), 2u);
  EXPECT_EQ(c.new_interactions.size(), 3u);
  s.MarkPersisted();
  store::StateChange again;
  s.CollectChanges(&again);
  EXPECT_TRUE(again.new_users.empty());
  EXPECT_TRUE(again.new_interactions.empty());
}

TEST(TrainingState, LoadFromStoreRebuildsTheCommittedState) {
  const fs::path dir = fs::temp_directory_path() / ("plumb_state_" + std::to_string(::getpid()));
  fs::remove_all(dir);
  std::unique_ptr<store::Store> store;
  store::StoreOptions so;
  so.sync = false;
  ASSERT_TRUE(store::Store::OpenPrimary(dir.string(), so, &store).ok());
  std::vector<store::EventInput> in;
  for (int n = 0; n < 3000; ++n) {
    store::EventInput e;
    e.user_id = "m" + std::to_string(n % 97);
    e.item_id = "t" + std::to_string((n * 7) % 53);
    e.timestamp_ms = n + 1;
    in.push_back(e);
  }
  store::AppendResult ar;
  ASSERT_TRUE(store->AppendEvents(in, &ar).ok());

  TrainingState s(0.2);
  std::vector<store::Event> events;
  ASSERT_TRUE(store->ReadEvents(0, 2000, &events).ok());
  for (const auto& e : events) ASSERT_TRUE(s.Apply(e, nullptr).ok());
  store::StateChange c;
  s.CollectChanges(&c);
  c.cursor = 2000;
  ASSERT_TRUE(store->Commit(c).ok());
  s.MarkPersisted();

  TrainingState loaded;
  uint64_t cursor = 0;
  ASSERT_TRUE(TrainingState::Load(*store, 0.2, &loaded, &cursor).ok());
  EXPECT_EQ(cursor, 2000u);
  EXPECT_EQ(loaded.users().names(), s.users().names());
  EXPECT_EQ(loaded.items().names(), s.items().names());
  ASSERT_EQ(loaded.train().size(), s.train().size());
  for (size_t p = 0; p < s.train().size(); ++p)
    EXPECT_EQ(loaded.train().pair(p), s.train().pair(p));
  EXPECT_EQ(loaded.validation(), s.validation());
  EXPECT_GT(s.validation().size(), 0u);
  // Nothing to persist right after a load.
  store::StateChange none;
  loaded.CollectChanges(&none);
  EXPECT_TRUE(none.new_users.empty() && none.new_interactions.empty());
  store.reset();
  fs::remove_all(dir);
}

// The training window by hand: window 10 days. ann-saw at day 0, ann-drill at day 5, bob-saw
// at day 20: the newest event is day 20, the cut day 10, so ann's two pairs leave training and
// bob-saw stays. ann-saw again at day 21 comes back as a new training pair; a repeat of a
// pair keeps it alive (its latest event counts, not its first).
TEST(TrainingState, WindowDropsPairsWhoseLatestEventIsTooOld) {
  constexpr int64_t kDay = 86'400'000;
  auto at = [](uint64_t seq, std::string u, std::string i, int64_t day) {
    store::Event e = Ev(seq, std::move(u), std::move(i));
    e.timestamp_ms = 1'700'000'000'000 + day * kDay;
    return e;
  };
  TrainingState s(0.0);
  s.set_window_ms(10 * kDay);
  ASSERT_TRUE(s.Apply(at(1, "ann", "saw", 0), nullptr).ok());
  ASSERT_TRUE(s.Apply(at(2, "ann", "drill", 5), nullptr).ok());
  ASSERT_TRUE(s.Apply(at(3, "cid", "ladder", 1), nullptr).ok());
  ASSERT_TRUE(s.Apply(at(4, "cid", "ladder", 15), nullptr).ok());  // repeat keeps it alive
  ASSERT_TRUE(s.Apply(at(5, "bob", "saw", 20), nullptr).ok());
  s.MarkPersisted();
  uint64_t removed = 0;
  ASSERT_TRUE(s.Compact(&removed).ok());
  EXPECT_EQ(removed, 2u);
  ASSERT_EQ(s.train().size(), 2u);
  EXPECT_EQ(s.train().user_degree(0), 0u);  // ann
  EXPECT_EQ(s.train().item_degree(0), 1u);  // saw: bob only
  store::StateChange nothing;
  s.CollectChanges(&nothing);
  EXPECT_TRUE(nothing.new_interactions.empty()) << "the survivors were persisted already";

  std::vector<uint64_t> fresh;
  ASSERT_TRUE(s.Apply(at(6, "ann", "saw", 21), &fresh).ok());
  EXPECT_EQ(fresh, (std::vector<uint64_t>{2}));
  store::StateChange back;
  s.CollectChanges(&back);
  ASSERT_EQ(back.new_interactions.size(), 1u);  // re-adding to the store is harmless
  EXPECT_EQ(s.users().size(), 3u) << "ids are never dropped";
  // Without a window nothing leaves.
  TrainingState all(0.0);
  ASSERT_TRUE(all.Apply(at(1, "ann", "saw", 0), nullptr).ok());
  ASSERT_TRUE(all.Apply(at(2, "bob", "saw", 400), nullptr).ok());
  ASSERT_TRUE(all.Compact(&removed).ok());
  EXPECT_EQ(removed, 0u);
  EXPECT_EQ(all.train().size(), 2u);
}

}  // namespace
}  // namespace plumb::online
