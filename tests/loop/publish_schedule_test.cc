// When the online loop publishes (PublishSchedule) and how much idle replay it may still do
// (IdleReplayBudget): the rules of their headers, on a fake clock.
#include "trainer/online/publish_schedule.h"

#include <gtest/gtest.h>

#include <chrono>

#include "trainer/online/idle_replay_budget.h"

namespace plumb::online {
namespace {

using Clock = PublishSchedule::Clock;
using std::chrono::milliseconds;

TEST(PublishSchedule, DueAfterEnoughEventsOrEnoughTimeButOnlyWithSomethingNew) {
  const Clock::time_point t0{};
  PublishSchedule s(/*every_events=*/100, /*every_seconds=*/30.0, t0);
  // Nothing learned: never due by itself, however long it has been.
  EXPECT_FALSE(s.HasUnpublished());
  EXPECT_FALSE(s.Due(false, t0 + std::chrono::hours(1)));
  // A request is always due, even with nothing new.
  EXPECT_TRUE(s.Due(true, t0));

  s.AddEvents(99);
  EXPECT_TRUE(s.HasUnpublished());
  EXPECT_FALSE(s.Due(false, t0 + milliseconds(29'999)));
  EXPECT_TRUE(s.Due(false, t0 + milliseconds(30'000)));  // every_seconds reached
  s.AddEvents(1);
  EXPECT_TRUE(s.Due(false, t0));  // every_events reached

  // A publish starts the counts and the clock again.
  const Clock::time_point t1 = t0 + milliseconds(40'000);
  s.Published(t1);
  EXPECT_FALSE(s.HasUnpublished());
  EXPECT_FALSE(s.Due(false, t1 + milliseconds(60'000)));
  // Samples alone (idle replay) count as something new, for the time rule only.
  s.AddSamples(5000);
  EXPECT_TRUE(s.HasUnpublished());
  EXPECT_FALSE(s.Due(false, t1 + milliseconds(29'000)));
  EXPECT_TRUE(s.Due(false, t1 + milliseconds(30'000)));
}

TEST(IdleReplayBudget, RefillTakeAndClear) {
  IdleReplayBudget b(/*passes=*/2.5);
  EXPECT_TRUE(b.empty());
  EXPECT_EQ(b.Take(10), 0u);
  b.Refill(1000);  // 2.5 passes over 1000 pairs
  EXPECT_EQ(b.Take(1024), 1024u);
  EXPECT_EQ(b.Take(1024), 1024u);
  EXPECT_EQ(b.Take(1024), 452u);  // 2500 - 2048: what is left
  EXPECT_TRUE(b.empty());
  b.Refill(10);
  b.Refill(4);  // replaces, does not add
  EXPECT_EQ(b.Take(100), 10u);
  b.Refill(1000);
  b.Clear();
  EXPECT_TRUE(b.empty());
}

}  // namespace
}  // namespace plumb::online
