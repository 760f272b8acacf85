// A restart after event-log retention rebuilds the same training state: TrainingState::Load on a
// store whose oldest events were folded into pair_history (Store::RetainEvents) gives exactly
// what Load gave before they were removed, which is what replaying every event gives: the
// same dictionaries, training pairs in the same order, held-out pairs, newest times and
// watermark, with and without a training window.
#include <unistd.h>

#include <filesystem>

#include <gtest/gtest.h>

#include "store/store.h"
#include "trainer/online/training_state.h"

namespace plumb::online {
namespace {

namespace fs = std::filesystem;

constexpr int64_t kSecond = 1000;
constexpr int64_t kBase = 1'700'000'000'000;

// 4000 events, sequence k+1 at kBase + k s (give or take a few seconds of jitter, some late):
// members m0..m52; early events use tools t0..t20, later ones t10..t40, and every tenth event
// revisits an early pair, so that with a window some pairs leave and some come back.
std::vector<store::EventInput> Stream() {
  std::vector<store::EventInput> out;
  for (int k = 0; k < 4000; ++k) {
    store::EventInput e;
    int user = k % 53;
    int item = k < 1500 ? (k * 7) % 21 : 10 + (k * 7) % 31;
    if (k % 10 == 0) {
      user = (k / 10) % 53;
      item = (k / 10) % 21;
    }
    e.user_id = "m" + std::to_string(user);
    e.item_id = "t" + std::to_string(item);
    e.timestamp_ms = kBase + k * kSecond + (k % 13 == 0 ? -5 * kSecond : (k % 3) * 100);
    out.push_back(e);
  }
  return out;
}

void ExpectSame(const TrainingState& a, const TrainingState& b) {
  EXPECT_EQ(a.users().names(), b.users().names());
  EXPECT_EQ(a.items().names(), b.items().names());
  ASSERT_EQ(a.train().size(), b.train().size());
  for (size_t p = 0; p < a.train().size(); ++p) {
    ASSERT_EQ(a.train().pair(p), b.train().pair(p)) << "training pair " << p;
  }
  EXPECT_EQ(a.validation(), b.validation());
  EXPECT_EQ(a.watermark_ms(), b.watermark_ms());
  const auto da = a.train().item_degrees(), db = b.train().item_degrees();
  EXPECT_TRUE(std::equal(da.begin(), da.end(), db.begin(), db.end()));
  if (a.window_ms() > 0) {
    for (const trainer::Pair& p : a.train().pairs()) {
      EXPECT_EQ(a.last_event_ms(p.user, p.item), b.last_event_ms(p.user, p.item));
    }
    for (const trainer::Pair& p : a.validation()) {
      EXPECT_EQ(a.last_event_ms(p.user, p.item), b.last_event_ms(p.user, p.item));
    }
  }
}

class RetentionRestart : public ::testing::Test {
 protected:
  void SetUp() override {
    dir_ = fs::temp_directory_path() / ("plumb_retention_" + std::to_string(::getpid()));
    fs::remove_all(dir_);
    store::StoreOptions so;
    so.sync = false;
    ASSERT_TRUE(store::Store::OpenPrimary(dir_.string(), so, &store_).ok());
    const auto events = Stream();
    store::AppendResult ar;
    ASSERT_TRUE(store_->AppendEvents(events, &ar).ok());
    // The trainer consumed 3000 of them and committed its state with the cursor.
    TrainingState trainer(kHoldout);
    std::vector<store::Event> read;
    ASSERT_TRUE(store_->ReadEvents(0, 3000, &read).ok());
    for (const store::Event& e : read) ASSERT_TRUE(trainer.Apply(e, nullptr).ok());
    store::StateChange change;
    trainer.CollectChanges(&change);
    change.cursor = 3000;
    ASSERT_TRUE(store_->Commit(change).ok());
  }
  void TearDown() override {
    store_.reset();
    fs::remove_all(dir_);
  }
  void Load(int64_t window_ms, TrainingState* out) {
    uint64_t cursor = 0;
    Status s = TrainingState::Load(*store_, kHoldout, out, &cursor, window_ms);
    ASSERT_TRUE(s.ok()) << s.ToString();
    EXPECT_EQ(cursor, 3000u);
  }
  // expect_first_left 0: not checked.
  void Retain(int64_t max_age_ms, uint64_t expect_first_left) {
    store::RetentionPolicy policy;
    policy.max_age_ms = max_age_ms;
    policy.events_per_write = 500;
    store::RetentionReport report;
    ASSERT_TRUE(store_->RetainEvents(policy, &report).ok());
    if (expect_first_left != 0) {
      EXPECT_EQ(report.first_seq_after, expect_first_left);
    }
  }

  static constexpr double kHoldout = 0.2;
  fs::path dir_;
  std::unique_ptr<store::Store> store_;
};

TEST_F(RetentionRestart, LoadAfterRetentionIsLoadBefore) {
  constexpr int64_t kWindow = 1000 * kSecond;
  TrainingState all_before, window_before;
  Load(0, &all_before);
  Load(kWindow, &window_before);
  ASSERT_GT(all_before.validation().size(), 10u);
  ASSERT_LT(window_before.train().size(), all_before.train().size()) << "the window bites";

  // Clock: the newest event, about kBase + 3999 s; 1500 s of age leaves the events from about
  // 2499 s on. Jitter makes the exact first survivor depend on the stream: read it back.
  Retain(1500 * kSecond, 0);
  store::LogStats log;
  ASSERT_TRUE(store_->GetLogStats(&log).ok());
  ASSERT_GT(log.removed_events, 2000u);
  ASSERT_LT(log.folded_through, 3000u);

  TrainingState all_after, window_after;
  Load(0, &all_after);
  Load(kWindow, &window_after);
  ExpectSame(all_before, all_after);
  ExpectSame(window_before, window_after);

  // Everything up to the cursor folded: the log holds only what the trainer has not seen.
  Retain(1, 3001);
  TrainingState all_folded, window_folded;
  Load(0, &all_folded);
  Load(kWindow, &window_folded);
  ExpectSame(all_before, all_folded);
  ExpectSame(window_before, window_folded);

  // And both go on alike: the events after the cursor fold in the same way.
  std::vector<store::Event> rest;
  ASSERT_TRUE(store_->ReadEvents(3000, 2000, &rest).ok());
  ASSERT_EQ(rest.size(), 1000u);
  for (const store::Event& e : rest) {
    ASSERT_TRUE(all_before.Apply(e, nullptr).ok());
    ASSERT_TRUE(all_folded.Apply(e, nullptr).ok());
    ASSERT_TRUE(window_before.Apply(e, nullptr).ok());
    ASSERT_TRUE(window_folded.Apply(e, nullptr).ok());
  }
  ASSERT_TRUE(window_before.Compact(nullptr).ok());
  ASSERT_TRUE(window_folded.Compact(nullptr).ok());
  ExpectSame(all_before, all_folded);
  ExpectSame(window_before, window_folded);
}

}  // namespace
}  // namespace plumb::online
