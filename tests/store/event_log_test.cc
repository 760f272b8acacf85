// The event log: append, read back, page, de-duplicate, survive a reopen.
#include <chrono>
#include <set>
#include <thread>

#include "core/clock.h"
#include "tests/store/store_fixture.h"

namespace plumb::store {
namespace {

using testing::StoreFixture;
using EventLogTest = StoreFixture;

TEST_F(EventLogTest, AppendedEventsReadBackFieldForField) {
  const auto loans = Loans(3, 0);
  const int64_t before = NowMs();
  AppendResult r;
  ASSERT_TRUE(store_->AppendEvents(loans, &r).ok());
  EXPECT_EQ(r.appended, 3u);
  EXPECT_EQ(r.duplicates, 0u);
  EXPECT_EQ(r.seqs, (std::vector<uint64_t>{1, 2, 3}));
  EXPECT_EQ(r.last_seq, 3u);
  EXPECT_EQ(store_->LastSequence(), 3u);

  std::vector<Event> events;
  ASSERT_TRUE(store_->ReadEvents(0, 100, &events).ok());
  ASSERT_EQ(events.size(), 3u);
  for (size_t k = 0; k < 3; ++k) {
    EXPECT_EQ(events[k].seq, k + 1);
    EXPECT_EQ(events[k].user_id, loans[k].user_id);
    EXPECT_EQ(events[k].item_id, loans[k].item_id);
    EXPECT_EQ(events[k].timestamp_ms, loans[k].timestamp_ms);
    EXPECT_EQ(events[k].event_id, loans[k].event_id);
    EXPECT_EQ(events[k].weight, loans[k].weight);
    EXPECT_GE(events[k].received_ms, before);
    EXPECT_LE(events[k].received_ms, NowMs());
  }
}

TEST_F(EventLogTest, ReadEventsPagesInOrder) {
  AppendResult r;
  ASSERT_TRUE(store_->AppendEvents(Loans(10, 0), &r).ok());
  ASSERT_TRUE(store_->AppendEvents(Loans(15, 10), &r).ok());
  ASSERT_EQ(r.last_seq, 25u);

  std::vector<uint64_t> seen;
  std::vector<size_t> page_sizes;
  std::vector<Event> page;
  for (uint64_t after = 0;;) {
    ASSERT_TRUE(store_->ReadEvents(after, 10, &page).ok());
    page_sizes.push_back(page.size());
    if (page.empty()) break;
    for (const Event& e : page) seen.push_back(e.seq);
    after = page.back().seq;
  }
  EXPECT_EQ(page_sizes, (std::vector<size_t>{10, 10, 5, 0}));
  std::vector<uint64_t> want(25);
  for (uint64_t k = 0; k < 25; ++k) want[k] = k + 1;
  EXPECT_EQ(seen, want);

  // Reading from the middle, and past the end.
  ASSERT_TRUE(store_->ReadEvents(17, 3, &page).ok());
  ASSERT_EQ(page.size(), 3u);
  EXPECT_EQ(page[0].seq, 18u);
  EXPECT_EQ(page[0].event_id, "loan-17");
  ASSERT_TRUE(store_->ReadEvents(25, 3, &page).ok());
  EXPECT_TRUE(page.empty());
  ASSERT_TRUE(store_->ReadEvents(0, 0, &page).ok());
  EXPECT_TRUE(page.empty());
}

TEST_F(EventLogTest, DuplicatesAcrossAndWithinBatchesTakeNoSequence) {
  AppendResult r;
  ASSERT_TRUE(store_->AppendEvents(Loans(1, 0), &r).ok());  // loan-0 -> 1
  auto batch = Loans(1, 0);                                 // loan-0 again
  auto fresh = Loans(1, 1);                                 // loan-1
  batch.push_back(fresh[0]);
  batch.push_back(fresh[0]);                         // loan-1 twice in one batch
  auto anonymous = Loans(2, 2, /*with_ids=*/false);  // no event id: never duplicates
  anonymous[1] = anonymous[0];
  batch.insert(batch.end(), anonymous.begin(), anonymous.end());

  ASSERT_TRUE(store_->AppendEvents(batch, &r).ok());
  EXPECT_EQ(r.appended, 3u);
  EXPECT_EQ(r.duplicates, 2u);
  EXPECT_EQ(r.seqs, (std::vector<uint64_t>{1, 2, 2, 3, 4}));
  EXPECT_EQ(r.duplicate, (std::vector<bool>{true, false, true, false, false}));
  EXPECT_EQ(r.last_seq, 4u);

  std::vector<Event> events;
  ASSERT_TRUE(store_->ReadEvents(0, 100, &events).ok());
  ASSERT_EQ(events.size(), 4u);
  EXPECT_EQ(events[1].event_id, "loan-1");

  // A batch of nothing but duplicates writes nothing and reports the same end.
  ASSERT_TRUE(store_->AppendEvents(Loans(2, 0), &r).ok());
  EXPECT_EQ(r.appended, 0u);
  EXPECT_EQ(r.seqs, (std::vector<uint64_t>{1, 2}));
  EXPECT_EQ(r.last_seq, 4u);

  // De-duplication survives a reopen (it lives in the event_ids family, not in memory).
  Reopen();
  ASSERT_TRUE(store_->AppendEvents(Loans(1, 1), &r).ok());
  EXPECT_TRUE(r.duplicate[0]);
  EXPECT_EQ(r.seqs[0], 2u);
}

TEST_F(EventLogTest, DuplicateOutsideTheWindowIsAppendedAgain) {
  StoreOptions options = testing::TestOptions();
  options.dedup_window_ms = 20;
  Open(options);
  AppendResult r;
  ASSERT_TRUE(store_->AppendEvents(Loans(1, 0), &r).ok());
  std::this_thread::sleep_for(std::chrono::milliseconds(60));
  ASSERT_TRUE(store_->AppendEvents(Loans(1, 0), &r).ok());
  EXPECT_FALSE(r.duplicate[0]);
  EXPECT_EQ(r.seqs[0], 2u);
  // ...and the new copy starts a new window.
  ASSERT_TRUE(store_->AppendEvents(Loans(1, 0), &r).ok());
  EXPECT_TRUE(r.duplicate[0]);
  EXPECT_EQ(r.seqs[0], 2u);
}

TEST_F(EventLogTest, WindowZeroRemembersForever) {
  StoreOptions options = testing::TestOptions();
  options.dedup_window_ms = 0;
  Open(options);
  AppendResult r;
  ASSERT_TRUE(store_->AppendEvents(Loans(1, 0), &r).ok());
  std::this_thread::sleep_for(std::chrono::milliseconds(30));
  ASSERT_TRUE(store_->AppendEvents(Loans(1, 0), &r).ok());
  EXPECT_TRUE(r.duplicate[0]);
}

TEST_F(EventLogTest, SequenceContinuesAfterReopen) {
  Open(StoreOptions());  // the production default: fsync per append
  ASSERT_TRUE(options_.sync);
  AppendResult r;
  ASSERT_TRUE(store_->AppendEvents(Loans(5, 0), &r).ok());
  Reopen();
  EXPECT_EQ(store_->LastSequence(), 5u);
  ASSERT_TRUE(store_->AppendEvents(Loans(2, 5), &r).ok());
  EXPECT_EQ(r.seqs, (std::vector<uint64_t>{6, 7}));
}

TEST_F(EventLogTest, EmptyIdsAreRejectedAndNothingIsAppended) {
  auto batch = Loans(3, 0);
  batch[2].item_id.clear();
  AppendResult r;
  Status s = store_->AppendEvents(batch, &r);
  EXPECT_EQ(s.code(), Status::Code::kInvalidArgument);
  EXPECT_NE(s.message().find("event 2"), std::string::npos) << s.message();
  EXPECT_EQ(store_->LastSequence(), 0u);
  std::vector<Event> events;
  ASSERT_TRUE(store_->ReadEvents(0, 10, &events).ok());
  EXPECT_TRUE(events.empty());
  // The rejected batch's ids were not remembered either.
  ASSERT_TRUE(store_->AppendEvents(Loans(1, 0), &r).ok());
  EXPECT_FALSE(r.duplicate[0]);
}

TEST_F(EventLogTest, ConcurrentAppendsGetDistinctConsecutiveSequences) {
  constexpr int kThreads = 4;
  constexpr int kBatches = 20;
  std::vector<std::thread> threads;
  for (int t = 0; t < kThreads; ++t) {
    threads.emplace_back([this, t] {
      for (int b = 0; b < kBatches; ++b) {
        AppendResult r;
        ASSERT_TRUE(store_->AppendEvents(Loans(5, (t * kBatches + b) * 5), &r).ok());
        // One batch gets one consecutive run.
        for (size_t k = 1; k < r.seqs.size(); ++k) ASSERT_EQ(r.seqs[k], r.seqs[k - 1] + 1);
      }
    });
  }
  for (auto& th : threads) th.join();
  EXPECT_EQ(store_->LastSequence(), uint64_t{kThreads * kBatches * 5});
  std::vector<Event> events;
  ASSERT_TRUE(store_->ReadEvents(0, 10000, &events).ok());
  ASSERT_EQ(events.size(), size_t{kThreads * kBatches * 5});
  std::set<std::string> ids;
  for (size_t k = 0; k < events.size(); ++k) {
    EXPECT_EQ(events[k].seq, k + 1);
    ids.insert(events[k].event_id);
  }
  EXPECT_EQ(ids.size(), events.size());
}

TEST_F(EventLogTest, SecondPrimaryOnTheSameDirectoryIsRefused) {
  std::unique_ptr<Store> other;
  Status s = Store::OpenPrimary(dir_, StoreOptions(), &other);
  EXPECT_EQ(s.code(), Status::Code::kUnavailable) << s.ToString();
  EXPECT_EQ(other, nullptr);
}

TEST_F(EventLogTest, MissingStoreWithoutCreateFails) {
  StoreOptions options = testing::TestOptions();
  options.create_if_missing = false;
  std::unique_ptr<Store> other;
  EXPECT_FALSE(Store::OpenPrimary(scratch_.Sub("absent"), options, &other).ok());
  EXPECT_EQ(other, nullptr);
}

// A disk that is about full: writes that would cut into the reserve are refused before
// RocksDB sees them (a write that meets a full disk leaves RocksDB refusing writes, and can
// abort the process), nothing is written, and writing works again once the reserve allows.
TEST_F(EventLogTest, WritesThatWouldCutIntoTheDiskReserveAreRefused) {
  StoreOptions options = testing::TestOptions();
  options.min_free_disk_bytes = uint64_t{1} << 60;  // more than any disk has free
  Open(options);
  AppendResult r;
  Status s = store_->AppendEvents(Loans(3, 0), &r);
  EXPECT_EQ(s.code(), Status::Code::kResourceExhausted) << s.ToString();
  EXPECT_NE(s.message().find("No space left"), std::string::npos) << s.ToString();
  EXPECT_EQ(store_->LastSequence(), 0u);
  StateChange change;
  change.new_users.emplace_back(0, "member-0");
  EXPECT_EQ(store_->Commit(change).code(), Status::Code::kResourceExhausted);
  EXPECT_EQ(store_->IdCount(IdSpace::kUser), 0u);

  options.min_free_disk_bytes = 1 << 20;  // 1 MB: any disk the tests run on has that
  Open(options);
  ASSERT_TRUE(store_->AppendEvents(Loans(3, 0), &r).ok());
  EXPECT_EQ(store_->LastSequence(), 3u);
}

}  // namespace
}  // namespace plumb::store
