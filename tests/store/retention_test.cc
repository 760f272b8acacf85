// Event-log retention (store/retention.cc): which events go, what pair_history then holds, and
// that nothing beyond the trainer's cursor is touched. Expected values are counted by hand in
// each test from the events it appends.
#include <algorithm>
#include <map>
#include <tuple>

#include "tests/store/store_fixture.h"

namespace plumb::store {
namespace {

using testing::StoreFixture;

constexpr int64_t kBase = 1'700'000'000'000;
constexpr int64_t kSecond = 1000;

class RetentionTest : public StoreFixture {
 protected:
  // Appends n events one call each (k = first .. first+n-1): user member-(k % 7), item
  // tool-(k % 11), timestamp kBase + k seconds, event id loan-k; records each one's stored
  // bytes (the growth of LogStats::bytes) and input.
  void AppendOneByOne(int n, int first) {
    for (const EventInput& e : Loans(n, first)) {
      EventInput timed = e;
      timed.timestamp_ms = kBase + (timed.timestamp_ms - 1'700'000'000'000) * kSecond;
      AppendOne(timed);
    }
  }
  void AppendOne(const EventInput& e) {
    LogStats before, after;
    ASSERT_TRUE(store_->GetLogStats(&before).ok());
    AppendResult r;
    ASSERT_TRUE(store_->AppendEvents(std::span<const EventInput>(&e, 1), &r).ok());
    ASSERT_EQ(r.appended, 1u);
    ASSERT_TRUE(store_->GetLogStats(&after).ok());
    sizes_[r.last_seq] = after.bytes - before.bytes;
    inputs_[r.last_seq] = e;
  }
  void SetCursor(uint64_t cursor) {
    StateChange change;
    change.cursor = cursor;
    ASSERT_TRUE(store_->Commit(change).ok());
  }
  std::vector<uint64_t> LoggedSeqs() {
    std::vector<Event> events;
    EXPECT_TRUE(store_->ReadEvents(0, 1'000'000, &events).ok());
    std::vector<uint64_t> seqs;
    for (const Event& e : events) seqs.push_back(e.seq);
    return seqs;
  }
  // pair_history by external ids.
  std::map<std::pair<std::string, std::string>, PairHistory> History() {
    std::vector<std::string> users, items;
    EXPECT_TRUE(store_->LoadIds(IdSpace::kUser, store_->IdCount(IdSpace::kUser), &users).ok());
    EXPECT_TRUE(store_->LoadIds(IdSpace::kItem, store_->IdCount(IdSpace::kItem), &items).ok());
    std::map<std::pair<std::string, std::string>, PairHistory> out;
    EXPECT_TRUE(store_
                    ->ForEachPairHistory([&](uint32_t u, uint32_t i, const PairHistory& h) {
                      out[{users.at(u), items.at(i)}] = h;
                    })
                    .ok());
    return out;
  }
  // The same, counted from the inputs of sequences [1, through].
  std::map<std::pair<std::string, std::string>, PairHistory> Expected(uint64_t through) {
    std::map<std::pair<std::string, std::string>, PairHistory> out;
    for (const auto& [seq, e] : inputs_) {
      if (seq > through) break;
      PairHistory& h = out[{e.user_id, e.item_id}];
      if (h.count == 0) h.first_seq = seq;
      ++h.count;
      h.last_ms = std::max(h.last_ms, e.timestamp_ms);
    }
    return out;
  }

  std::map<uint64_t, uint64_t> sizes_;
  std::map<uint64_t, EventInput> inputs_;
};

TEST_F(RetentionTest, AgeRuleRemovesExactlyTheEventsOlderThanTheCut) {
  AddIds(7, 11);
  AppendOneByOne(1000, 0);  // seq k+1 has timestamp kBase + k s
  SetCursor(1000);
  LogStats before;
  ASSERT_TRUE(store_->GetLogStats(&before).ok());
  EXPECT_EQ(before.events, 1000u);
  EXPECT_EQ(before.first_seq, 1u);
  EXPECT_EQ(before.oldest_timestamp_ms, kBase);

  RetentionPolicy policy;
  policy.max_age_ms = 300 * kSecond;
  policy.events_per_write = 64;  // several writes per pass
  RetentionReport report;
  ASSERT_TRUE(store_->RetainEvents(policy, &report).ok());
  // The clock is the newest timestamp, kBase + 999 s; the cut kBase + 699 s. Older: k < 699,
  // i.e. sequences 1..699.
  EXPECT_EQ(report.cut_ms, kBase + 699 * kSecond);
  EXPECT_EQ(report.removed_events, 699u);
  EXPECT_EQ(report.first_seq_after, 700u);
  EXPECT_EQ(report.stopped_by, "an event within the age and the log within its budget");
  std::vector<uint64_t> expect_left;
  for (uint64_t s = 700; s <= 1000; ++s) expect_left.push_back(s);
  EXPECT_EQ(LoggedSeqs(), expect_left);

  uint64_t removed_bytes = 0;
  for (uint64_t s = 1; s <= 699; ++s) removed_bytes += sizes_[s];
  EXPECT_EQ(report.removed_bytes, removed_bytes);
  LogStats after;
  ASSERT_TRUE(store_->GetLogStats(&after).ok());
  EXPECT_EQ(after.first_seq, 700u);
  EXPECT_EQ(after.events, 301u);
  EXPECT_EQ(after.bytes, before.bytes - removed_bytes);
  EXPECT_EQ(after.oldest_timestamp_ms, kBase + 699 * kSecond);
  EXPECT_EQ(after.removed_events, 699u);
  EXPECT_EQ(after.removed_bytes, removed_bytes);
  EXPECT_EQ(after.folded_through, 699u);
  EXPECT_EQ(after.folded_watermark_ms, kBase + 698 * kSecond);
  EXPECT_EQ(after.retention_passes, 1u);
  EXPECT_EQ(after.last_seq, 1000u);

  // Every removed event is in pair_history: 699 events over the 77 (k % 7, k % 11) pairs.
  const auto history = History();
  EXPECT_EQ(history, Expected(699));
  EXPECT_EQ(history.size(), 77u);
  EXPECT_EQ(after.history_pairs, 77u);
  uint64_t folded = 0;
  for (const auto& [pair, h] : history) folded += h.count;
  EXPECT_EQ(folded, 699u);

  // A second pass with the same clock finds nothing more; the totals survive a reopen.
  ASSERT_TRUE(store_->RetainEvents(policy, &report).ok());
  EXPECT_EQ(report.removed_events, 0u);
  Reopen();
  LogStats reopened;
  ASSERT_TRUE(store_->GetLogStats(&reopened).ok());
  EXPECT_EQ(reopened.bytes, after.bytes);
  EXPECT_EQ(reopened.removed_events, 699u);
  EXPECT_EQ(reopened.retention_passes, 1u);
  EXPECT_EQ(store_->LastSequence(), 1000u);
}

TEST_F(RetentionTest, NeverRemovesAnEventBeyondTheCursor) {
  AddIds(7, 11);
  AppendOneByOne(400, 0);
  SetCursor(150);
  RetentionPolicy everything;
  everything.max_age_ms = 1;  // every event but the newest is older than that
  everything.events_per_write = 32;
  RetentionReport report;
  ASSERT_TRUE(store_->RetainEvents(everything, &report).ok());
  EXPECT_EQ(report.removed_events, 150u);
  EXPECT_EQ(report.stopped_by, "the trainer's cursor");
  EXPECT_EQ(LoggedSeqs().front(), 151u);
  EXPECT_EQ(History(), Expected(150));

  // The trainer moves on; the next pass follows it, merging into the existing records.
  SetCursor(400);
  ASSERT_TRUE(store_->RetainEvents(everything, &report).ok());
  EXPECT_EQ(report.removed_events, 249u);  // the newest (seq 400) is not older than 1 ms
  EXPECT_EQ(LoggedSeqs(), std::vector<uint64_t>{400});
  EXPECT_EQ(History(), Expected(399));
  EXPECT_GT(report.pairs_updated, report.pairs_added);

  // Without a cursor nothing is ever removed.
  testing::ScratchDir other;
  std::unique_ptr<Store> fresh;
  ASSERT_TRUE(Store::OpenPrimary(other.Sub("s"), testing::TestOptions(), &fresh).ok());
  auto loans = Loans(20, 0);
  AppendResult ar;
  ASSERT_TRUE(fresh->AppendEvents(loans, &ar).ok());
  ASSERT_TRUE(fresh->RetainEvents(everything, &report).ok());
  EXPECT_EQ(report.removed_events, 0u);
}

TEST_F(RetentionTest, SizeBudgetRemovesTheOldestUntilTheLogFits) {
  AddIds(7, 11);
  AppendOneByOne(500, 0);
  SetCursor(500);
  LogStats before;
  ASSERT_TRUE(store_->GetLogStats(&before).ok());
  RetentionPolicy policy;
  policy.max_log_bytes = before.bytes / 3;
  RetentionReport report;
  ASSERT_TRUE(store_->RetainEvents(policy, &report).ok());
  LogStats after;
  ASSERT_TRUE(store_->GetLogStats(&after).ok());
  // Within the budget, and not one event more removed than needed: putting back the newest
  // removed event would exceed it.
  EXPECT_LE(after.bytes, policy.max_log_bytes);
  ASSERT_GT(after.first_seq, 1u);
  EXPECT_GT(after.bytes + sizes_[after.first_seq - 1], policy.max_log_bytes);
  uint64_t left = 0;
  for (uint64_t s = after.first_seq; s <= 500; ++s) left += sizes_[s];
  EXPECT_EQ(after.bytes, left);
  EXPECT_EQ(History(), Expected(after.first_seq - 1));

  // Both rules: an event goes when either says so.
  RetentionPolicy both;
  both.max_log_bytes = policy.max_log_bytes;
  both.max_age_ms = 100 * kSecond;  // cut kBase + 399 s: sequences 1..399
  ASSERT_TRUE(store_->RetainEvents(both, &report).ok());
  EXPECT_EQ(LoggedSeqs().front(), 400u);
}

TEST_F(RetentionTest, ALateEventWaitsForTheEventsBeforeIt) {
  AddIds(7, 11);
  AppendOneByOne(100, 0);
  EventInput late = Loans(1, 3)[0];
  late.event_id = "late-one";
  late.timestamp_ms = kBase - 3600 * kSecond;  // an hour before everything else
  AppendOne(late);                             // seq 101
  AppendOneByOne(100, 100);                    // seq 102..201, timestamps 100..199 s
  SetCursor(201);
  RetentionPolicy policy;
  policy.max_age_ms = 120 * kSecond;  // clock 199 s: the cut is 79 s, sequences 1..79
  RetentionReport report;
  ASSERT_TRUE(store_->RetainEvents(policy, &report).ok());
  EXPECT_EQ(report.removed_events, 79u);
  const std::vector<uint64_t> left = LoggedSeqs();
  EXPECT_NE(std::find(left.begin(), left.end(), 101u), left.end()) << "the late event waits";
  // Once the events before it are old enough, it goes with them.
  // Cut 149 s: sequences 80..100, then 101 (older still), then 102..150 (100..148 s).
  policy.max_age_ms = 50 * kSecond;
  ASSERT_TRUE(store_->RetainEvents(policy, &report).ok());
  EXPECT_EQ(LoggedSeqs().front(), 151u);
  EXPECT_EQ(History(), Expected(150));
}

TEST_F(RetentionTest, DuplicatesAreStillRecognisedAfterTheirFirstCopyLeft) {
  AddIds(7, 11);
  AppendOneByOne(50, 0);
  SetCursor(50);
  RetentionPolicy policy;
  policy.max_age_ms = 1;
  RetentionReport report;
  ASSERT_TRUE(store_->RetainEvents(policy, &report).ok());
  ASSERT_EQ(report.removed_events, 49u);
  // loan-7 was sequence 8, now folded away: within the de-dup window a resend is still a
  // duplicate of it, and nothing is appended.
  auto again = Loans(1, 7);
  AppendResult r;
  ASSERT_TRUE(store_->AppendEvents(again, &r).ok());
  EXPECT_EQ(r.duplicates, 1u);
  EXPECT_EQ(r.seqs, std::vector<uint64_t>{8});
  EXPECT_EQ(store_->LastSequence(), 50u);
}

TEST_F(RetentionTest, FollowersSeeTheShrunkLogAndSecondariesCannotRetain) {
  AddIds(7, 11);
  AppendOneByOne(300, 0);
  SetCursor(300);
  RetentionPolicy policy;
  policy.max_age_ms = 100 * kSecond;
  RetentionReport report;
  ASSERT_TRUE(store_->RetainEvents(policy, &report).ok());
  std::unique_ptr<Store> follower;
  ASSERT_TRUE(Store::OpenSecondary(dir_, scratch_.Sub("follower"), &follower).ok());
  LogStats mine, theirs;
  ASSERT_TRUE(store_->GetLogStats(&mine).ok());
  ASSERT_TRUE(follower->GetLogStats(&theirs).ok());
  EXPECT_EQ(theirs.first_seq, mine.first_seq);
  EXPECT_EQ(theirs.bytes, mine.bytes);
  EXPECT_EQ(theirs.removed_events, mine.removed_events);
  EXPECT_EQ(theirs.history_pairs, mine.history_pairs);
  EXPECT_EQ(follower->RetainEvents(policy, &report).code(), Status::Code::kFailedPrecondition);
  uint64_t followed = 0;
  ASSERT_TRUE(follower->ForEachPairHistory([&](uint32_t, uint32_t, const PairHistory& h) {
                        followed += h.count;
                      })
                  .ok());
  EXPECT_EQ(followed, mine.removed_events);
}

TEST_F(RetentionTest, AnEventWithoutAnIdIsCorruptionAndNothingOfThatWriteApplies) {
  AddIds(7, 10);  // tool-10 has no index
  AppendOneByOne(30, 0);
  SetCursor(30);
  RetentionPolicy policy;
  policy.max_age_ms = 1;
  policy.events_per_write = 8;
  RetentionReport report;
  Status s = store_->RetainEvents(policy, &report);
  EXPECT_TRUE(s.IsCorruption()) << s.ToString();
  EXPECT_NE(s.message().find("tool-10"), std::string::npos) << s.message();
  // k = 10 is the first event naming tool-10 (sequence 11): the first write (1..8) went, the
  // second (9..16) did not.
  EXPECT_EQ(LoggedSeqs().front(), 9u);
  EXPECT_EQ(History(), Expected(8));
}

}  // namespace
}  // namespace plumb::store
