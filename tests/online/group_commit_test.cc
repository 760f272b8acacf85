#include "trainer/online/group_commit.h"

#include <gtest/gtest.h>
#include <spdlog/sinks/ostream_sink.h>
#include <spdlog/spdlog.h>

#include <atomic>
#include <set>
#include <sstream>
#include <string>
#include <thread>
#include <vector>

#include "tests/online/memory_event_log.h"
#include "tests/online/names.h"

namespace plumb::online {
namespace {

using testing::MemoryEventLog;
using testing::Name;

std::vector<store::EventInput> Events(const std::string& prefix, int n, bool with_ids = true) {
  std::vector<store::EventInput> out(n);
  for (int i = 0; i < n; ++i) {
    out[i].user_id = Name("member-", i % 7);
    out[i].item_id = Name("tool-", i);
    out[i].timestamp_ms = 1000 + i;
    if (with_ids) out[i].event_id = prefix + std::to_string(i);
  }
  return out;
}

TEST(GroupCommit, ConcurrentSubmittersAreAllStoredOnceAndShareWrites) {
  MemoryEventLog log;
  log.set_delay(std::chrono::microseconds(500));  // as a slow fsync would
  std::atomic<int> notified{0};
  GroupCommitOptions options;
  options.window = std::chrono::microseconds(2000);
  GroupCommitter committer(
      &log, [&] { ++notified; }, options);

  constexpr int kThreads = 8, kRequests = 25, kPerRequest = 40;
  std::atomic<uint64_t> acked{0};
  std::vector<std::thread> threads;
  for (int t = 0; t < kThreads; ++t) {
    threads.emplace_back([&, t] {
      for (int r = 0; r < kRequests; ++r) {
        auto f = committer.Submit(Events(Name("t", t) + Name("r", r) + "e", kPerRequest));
        CommitOutcome o = f.get();
        ASSERT_TRUE(o.status.ok()) << o.status.ToString();
        EXPECT_EQ(o.appended, uint64_t{kPerRequest});
        EXPECT_EQ(o.duplicates, 0u);
        EXPECT_GE(o.last_seq, o.appended);
        acked += o.appended;
      }
    });
  }
  for (auto& t : threads) t.join();
  committer.Close();

  const uint64_t total = kThreads * kRequests * kPerRequest;
  EXPECT_EQ(acked.load(), total);
  const auto events = log.events();
  ASSERT_EQ(events.size(), total);
  std::set<std::string> ids;
  for (const auto& e : events) ids.insert(e.event_id);
  EXPECT_EQ(ids.size(), total);
  // Grouping really happened: fewer writes than requests.
  const CommitterStats stats = committer.stats();
  EXPECT_LT(log.append_calls(), kThreads * kRequests);
  EXPECT_EQ(stats.groups, static_cast<uint64_t>(log.append_calls()));
  EXPECT_EQ(stats.appended, total);
  EXPECT_EQ(stats.last_seq, total);
  EXPECT_EQ(notified.load(), log.append_calls());
}

TEST(GroupCommit, DuplicatesAcrossAndWithinGroupsAreNotStoredTwice) {
  MemoryEventLog log;
  GroupCommitOptions options;
  options.window = std::chrono::milliseconds(50);  // both submissions land in one group
  GroupCommitter committer(&log, nullptr, options);
  auto first = committer.Submit(Events("loan-", 10));
  auto again = committer.Submit(Events("loan-", 10));  // same ids, same group
  CommitOutcome a = first.get(), b = again.get();
  ASSERT_TRUE(a.status.ok());
  ASSERT_TRUE(b.status.ok());
  EXPECT_EQ(a.appended, 10u);
  EXPECT_EQ(b.appended, 0u);
  EXPECT_EQ(b.duplicates, 10u);
  EXPECT_EQ(log.append_calls(), 1);

  // A later group: 5 old ids and 5 new ones; events without ids are never de-duplicated.
  std::vector<store::EventInput> mixed = Events("loan-", 15);
  mixed.erase(mixed.begin(), mixed.begin() + 5);
  auto no_ids = Events("", 3, /*with_ids=*/false);
  mixed.insert(mixed.end(), no_ids.begin(), no_ids.end());
  mixed.insert(mixed.end(), no_ids.begin(), no_ids.end());
  CommitOutcome c = committer.Submit(mixed).get();
  ASSERT_TRUE(c.status.ok());
  EXPECT_EQ(c.appended, 5u + 6u);
  EXPECT_EQ(c.duplicates, 5u);
  EXPECT_EQ(log.events().size(), 21u);
  EXPECT_EQ(c.last_seq, 21u);
}

TEST(GroupCommit, AFailedWriteFailsEveryWaitingSubmitterAndStoresNothing) {
  MemoryEventLog log;
  log.set_failure(Status::IoError("While fsync: a device error"));
  std::atomic<int> notified{0};
  GroupCommitOptions options;
  options.window = std::chrono::milliseconds(20);
  GroupCommitter committer(
      &log, [&] { ++notified; }, options);
  std::vector<std::future<CommitOutcome>> futures;
  for (int i = 0; i < 5; ++i) futures.push_back(committer.Submit(Events(Name("x", i), 4)));
  for (auto& f : futures) {
    CommitOutcome o = f.get();
    EXPECT_EQ(o.status.code(), Status::Code::kIoError);
    EXPECT_EQ(o.appended, 0u);
    EXPECT_EQ(o.duplicates, 0u);
  }
  EXPECT_TRUE(log.events().empty());
  EXPECT_EQ(notified.load(), 0);
  EXPECT_GE(committer.stats().failed_groups, 1u);
  EXPECT_EQ(committer.stats().appended, 0u);

  // The log recovers: later submissions are stored again.
  log.set_failure(Status::Ok());
  CommitOutcome o = committer.Submit(Events("y", 3)).get();
  EXPECT_TRUE(o.status.ok());
  EXPECT_EQ(o.appended, 3u);
  EXPECT_EQ(notified.load(), 1);
}

// A full disk fails every append for a while. The trainer's log gets one error when the
// episode starts (not one per write) and one line when writes work again; the failures are
// counted for the metrics.
TEST(GroupCommit, AFailureEpisodeIsLoggedOnceAndCounted) {
  std::ostringstream captured;
  auto sink = std::make_shared<spdlog::sinks::ostream_sink_mt>(captured);
  auto previous = spdlog::default_logger();
  spdlog::set_default_logger(std::make_shared<spdlog::logger>("capture", sink));

  MemoryEventLog log;
  log.set_failure(Status::IoError("While appending to file: No space left on device"));
  GroupCommitOptions options;
  options.window = std::chrono::microseconds(0);
  {
    GroupCommitter committer(&log, nullptr, options);
    for (int i = 0; i < 6; ++i) {
      EXPECT_FALSE(committer.Submit(Events(Name("full", i), 3)).get().status.ok());
    }
    log.set_failure(Status::Ok());
    EXPECT_TRUE(committer.Submit(Events("after", 2)).get().status.ok());
    log.set_failure(Status::IoError("No space left on device"));  // a second episode
    EXPECT_FALSE(committer.Submit(Events("again", 1)).get().status.ok());
    const CommitterStats stats = committer.stats();
    EXPECT_EQ(stats.failed_groups, 7u);
    EXPECT_EQ(stats.failed_events, 19u);
    EXPECT_EQ(stats.appended, 2u);
  }
  spdlog::set_default_logger(previous);

  const std::string text = captured.str();
  auto count = [&](const std::string& what) {
    size_t n = 0;
    for (size_t at = text.find(what); at != std::string::npos; at = text.find(what, at + 1)) ++n;
    return n;
  };
  EXPECT_EQ(count("appending events to the log failed"), 2u) << text;  // one per episode
  EXPECT_EQ(count("No space left on device"), 2u) << text;
  EXPECT_EQ(count("works again, after 6 failed writes that refused 18 events"), 1u) << text;
}

TEST(GroupCommit, MaxGroupSizeSplitsGroupsButNeverARequest) {
  MemoryEventLog log;
  GroupCommitOptions options;
  options.window = std::chrono::milliseconds(30);
  options.max_group_events = 10;
  GroupCommitter committer(&log, nullptr, options);
  auto big = committer.Submit(Events("big", 25));  // larger than a group: written whole
  auto a = committer.Submit(Events("a", 6));
  auto b = committer.Submit(Events("b", 6));  // 6 + 6 > 10: separate groups
  EXPECT_EQ(big.get().appended, 25u);
  EXPECT_EQ(a.get().appended, 6u);
  EXPECT_EQ(b.get().appended, 6u);
  EXPECT_EQ(log.append_calls(), 3);
}

TEST(GroupCommit, CloseWritesWhatIsQueuedThenRefuses) {
  MemoryEventLog log;
  GroupCommitOptions options;
  options.window = std::chrono::seconds(10);  // only Close() ends this window early
  GroupCommitter committer(&log, nullptr, options);
  auto queued = committer.Submit(Events("q", 7));
  committer.Close();
  CommitOutcome o = queued.get();
  EXPECT_TRUE(o.status.ok());
  EXPECT_EQ(o.appended, 7u);
  CommitOutcome late = committer.Submit(Events("late", 2)).get();
  EXPECT_EQ(late.status.code(), Status::Code::kUnavailable);
  EXPECT_EQ(log.events().size(), 7u);
  committer.Close();  // idempotent
}

TEST(GroupCommit, BackPressureBoundsTheQueueWithoutLosingEvents) {
  MemoryEventLog log;
  log.set_delay(std::chrono::milliseconds(2));
  GroupCommitOptions options;
  options.window = std::chrono::microseconds(0);
  options.max_queued_events = 50;
  options.max_group_events = 50;
  GroupCommitter committer(&log, nullptr, options);
  std::vector<std::future<CommitOutcome>> futures;
  for (int i = 0; i < 40; ++i) futures.push_back(committer.Submit(Events(Name("p", i) + "-", 20)));
  uint64_t appended = 0;
  for (auto& f : futures) appended += f.get().appended;
  EXPECT_EQ(appended, 800u);
  EXPECT_EQ(log.events().size(), 800u);
}

}  // namespace
}  // namespace plumb::online
