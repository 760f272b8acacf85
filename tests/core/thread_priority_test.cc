// LowerThisThreadsPriority: per-thread niceness (Linux setpriority on a thread id, see
// setpriority(2) "BUGS": nice is a per-thread attribute), never lowered, inherited by threads
// created afterwards (pthread_create copies the creator's nice value).
#include "core/thread_priority.h"

#include <gtest/gtest.h>

#include <thread>

namespace plumb {
namespace {

TEST(ThreadPriority, RaisesNicenessOfThisThreadOnlyAndNeverLowersIt) {
  int main_before = ThisThreadsNiceness();
  int in_thread = -100, after_lower_request = -100, child = -100;
  bool ok_zero = false, ok_bad = true;
  std::thread t([&] {
    const int start = ThisThreadsNiceness();
    const int target = start < 7 ? 7 : start;  // a sandbox may already run us nicer
    EXPECT_TRUE(LowerThisThreadsPriority(target));
    in_thread = ThisThreadsNiceness();
    EXPECT_EQ(in_thread, target);
    EXPECT_TRUE(LowerThisThreadsPriority(target > 1 ? target - 1 : 1));  // asks for less: kept
    after_lower_request = ThisThreadsNiceness();
    ok_zero = LowerThisThreadsPriority(0);
    ok_bad = LowerThisThreadsPriority(25);
    std::thread([&] { child = ThisThreadsNiceness(); }).join();
  });
  t.join();
  EXPECT_EQ(after_lower_request, in_thread);
  EXPECT_EQ(child, in_thread);  // inherited
  EXPECT_TRUE(ok_zero);
  EXPECT_FALSE(ok_bad);
  EXPECT_EQ(ThisThreadsNiceness(), main_before);  // the calling thread is untouched
}

}  // namespace
}  // namespace plumb
