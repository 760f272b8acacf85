// Background retention beside ingest and training (trainer/online/retention_runner.h): while
// one thread appends events and another trains on them and commits its cursor, the runner's
// passes remove old events. Afterwards every appended event is accounted for exactly once
// (left in the log, or counted in pair_history), nothing beyond the cursor was removed, no
// append failed, and a restart rebuilds the state the running trainer holds.
#include "trainer/online/retention_runner.h"

#include <gtest/gtest.h>
#include <unistd.h>

#include <atomic>
#include <filesystem>
#include <thread>

#include "store/store.h"
#include "trainer/online/training_state.h"

namespace plumb::online {
namespace {

namespace fs = std::filesystem;

constexpr int64_t kSecond = 1000;
constexpr int64_t kBase = 1'700'000'000'000;

TEST(RetentionRunner, PassesBesideIngestAndTrainingLoseNothingAndRestartAlike) {
  const fs::path dir =
      fs::temp_directory_path() / ("plumb_retention_runner_" + std::to_string(::getpid()));
  fs::remove_all(dir);
  store::StoreOptions so;
  so.sync = false;
  std::unique_ptr<store::Store> store;
  ASSERT_TRUE(store::Store::OpenPrimary(dir.string(), so, &store).ok());

  // 300 batches of 40 events, one simulated second apart per event: 12000 s of stream.
  constexpr int kBatches = 300, kPerBatch = 40;
  std::atomic<bool> appending{true};
  std::atomic<int> failed_appends{0};
  std::thread appender([&] {
    int k = 0;
    for (int b = 0; b < kBatches; ++b) {
      std::vector<store::EventInput> batch;
      for (int j = 0; j < kPerBatch; ++j, ++k) {
        store::EventInput e;
        e.user_id = "m" + std::to_string(k % 97);
        e.item_id = "t" + std::to_string((k * 13) % 61);
        e.timestamp_ms = kBase + k * kSecond;
        e.event_id = "e" + std::to_string(k);
        batch.push_back(e);
      }
      store::AppendResult r;
      if (!store->AppendEvents(batch, &r).ok() || r.appended != batch.size()) ++failed_appends;
    }
    appending = false;
  });

  RetentionOptions options;
  options.max_age_ms = 2000 * kSecond;  // keep about the newest 2000 events
  options.interval_ms = 20;
  options.events_per_write = 300;
  RetentionRunner runner(store.get(), options);
  runner.Start();

  // The trainer: read after the cursor, fold in, commit with the new cursor.
  TrainingState trainer(0.1);
  uint64_t cursor = 0;
  std::vector<store::Event> read;
  while (true) {
    const bool more_coming = appending.load();
    ASSERT_TRUE(store->ReadEvents(cursor, 500, &read).ok());
    if (read.empty()) {
      if (!more_coming) break;
      std::this_thread::sleep_for(std::chrono::milliseconds(2));
      continue;
    }
    for (const store::Event& e : read) ASSERT_TRUE(trainer.Apply(e, nullptr).ok());
    store::StateChange change;
    trainer.CollectChanges(&change);
    change.cursor = read.back().seq;
    ASSERT_TRUE(store->Commit(change).ok());
    trainer.MarkPersisted();
    cursor = read.back().seq;
  }
  appender.join();
  runner.Stop();
  // One last pass now that the cursor is at the end.
  store::RetentionReport last;
  ASSERT_TRUE(runner.RunOnce(&last).ok());

  EXPECT_EQ(failed_appends.load(), 0);
  const uint64_t total = uint64_t{kBatches} * kPerBatch;
  ASSERT_EQ(cursor, total);
  store::LogStats log;
  ASSERT_TRUE(store->GetLogStats(&log).ok());
  // By hand: event k has timestamp kBase + k s and sequence k + 1; the clock is the newest
  // event (k = 11999), the cut 2000 s before it, so event k goes iff k < 9999: sequences
  // 1..9999.
  EXPECT_EQ(log.folded_through, 9999u);
  EXPECT_EQ(log.first_seq, 10000u);
  EXPECT_EQ(log.events, total - 9999);
  EXPECT_EQ(log.removed_events, 9999u);
  EXPECT_GT(runner.totals().passes, 1u) << "passes ran while events arrived";
  uint64_t folded = 0;
  ASSERT_TRUE(store
                  ->ForEachPairHistory(
                      [&](uint32_t, uint32_t, const store::PairHistory& h) { folded += h.count; })
                  .ok());
  EXPECT_EQ(folded + log.events, total) << "every event exactly once: in the log or folded";
  EXPECT_EQ(runner.totals().removed_events, 9999u);

  TrainingState restarted;
  uint64_t loaded_cursor = 0;
  ASSERT_TRUE(TrainingState::Load(*store, 0.1, &restarted, &loaded_cursor).ok());
  EXPECT_EQ(loaded_cursor, total);
  EXPECT_EQ(restarted.users().names(), trainer.users().names());
  EXPECT_EQ(restarted.items().names(), trainer.items().names());
  ASSERT_EQ(restarted.train().size(), trainer.train().size());
  for (size_t p = 0; p < trainer.train().size(); ++p) {
    ASSERT_EQ(restarted.train().pair(p), trainer.train().pair(p)) << "training pair " << p;
  }
  EXPECT_EQ(restarted.validation(), trainer.validation());

  // A duplicate of an event whose copy retention removed is still recognised (dedup_window
  // keeps its own records).
  store::EventInput again;
  again.user_id = "m0";
  again.item_id = "t0";
  again.timestamp_ms = kBase;
  again.event_id = "e0";
  store::AppendResult r;
  ASSERT_TRUE(store->AppendEvents(std::span<const store::EventInput>(&again, 1), &r).ok());
  EXPECT_EQ(r.appended, 0u);

  store.reset();
  fs::remove_all(dir);
}

}  // namespace
}  // namespace plumb::online
