// AdmissionQueue: at most max_running calls hold a slot, the next max_waiting wait in
// arrival order, a full line refuses at once and a waiting call gives up at its deadline.
#include "server/admission_queue.h"

#include <gtest/gtest.h>

#include <atomic>
#include <mutex>
#include <thread>
#include <vector>

namespace plumb::server {
namespace {

using Clock = std::chrono::system_clock;
using std::chrono::milliseconds;

Clock::time_point In(milliseconds ms) { return Clock::now() + ms; }

TEST(AdmissionQueueTest, RunsUpToTheLimitAndRefusesBeyondTheLine) {
  AdmissionQueue queue({/*max_running=*/2, /*max_waiting=*/0});
  AdmissionQueue::Ticket a, b, c;
  ASSERT_TRUE(queue.Enter(In(milliseconds(100)), &a).ok());
  ASSERT_TRUE(queue.Enter(In(milliseconds(100)), &b).ok());
  EXPECT_EQ(queue.running(), 2);
  Status s = queue.Enter(In(milliseconds(100)), &c);
  EXPECT_EQ(s.code(), Status::Code::kResourceExhausted) << s.ToString();
  EXPECT_NE(s.message().find("overloaded"), std::string::npos) << s.ToString();
  EXPECT_FALSE(c.admitted());
  a = AdmissionQueue::Ticket();  // releases the slot
  EXPECT_EQ(queue.running(), 1);
  EXPECT_TRUE(queue.Enter(In(milliseconds(100)), &c).ok());
}

TEST(AdmissionQueueTest, AWaitingCallGivesUpAtItsDeadline) {
  AdmissionQueue queue({1, 4});
  AdmissionQueue::Ticket holder, waiter;
  ASSERT_TRUE(queue.Enter(In(milliseconds(1000)), &holder).ok());
  const auto start = std::chrono::steady_clock::now();
  Status s = queue.Enter(In(milliseconds(50)), &waiter);
  const auto waited = std::chrono::steady_clock::now() - start;
  EXPECT_EQ(s.code(), Status::Code::kAborted) << s.ToString();
  EXPECT_GE(waited, milliseconds(45));
  EXPECT_EQ(queue.waiting(), 0);  // it left the line
  EXPECT_EQ(queue.running(), 1);
}

TEST(AdmissionQueueTest, WaitingCallsStartFirstInFirstOut) {
  AdmissionQueue queue({1, 8});
  AdmissionQueue::Ticket first;
  ASSERT_TRUE(queue.Enter(In(milliseconds(5000)), &first).ok());
  std::mutex mu;
  std::vector<int> order;
  std::vector<std::thread> threads;
  for (int k = 0; k < 5; ++k) {
    threads.emplace_back([&, k] {
      AdmissionQueue::Ticket t;
      ASSERT_TRUE(queue.Enter(In(milliseconds(5000)), &t).ok());
      std::lock_guard<std::mutex> lock(mu);
      order.push_back(k);
    });
    // Each joins the line before the next one starts.
    while (queue.waiting() != k + 1) std::this_thread::yield();
  }
  first = AdmissionQueue::Ticket();
  for (auto& t : threads) t.join();
  EXPECT_EQ(order, (std::vector<int>{0, 1, 2, 3, 4}));
  EXPECT_EQ(queue.running(), 0);
  EXPECT_EQ(queue.waiting(), 0);
}

TEST(AdmissionQueueTest, ManyThreadsNeverExceedTheLimit) {
  AdmissionQueue queue({3, 1000});
  std::atomic<int> inside{0}, most{0}, done{0};
  std::vector<std::thread> threads;
  for (int k = 0; k < 16; ++k) {
    threads.emplace_back([&] {
      for (int n = 0; n < 200; ++n) {
        AdmissionQueue::Ticket t;
        ASSERT_TRUE(queue.Enter(Clock::time_point::max(), &t).ok());  // no deadline
        const int now = ++inside;
        int seen = most.load();
        while (now > seen && !most.compare_exchange_weak(seen, now)) {
        }
        --inside;
        ++done;
      }
    });
  }
  for (auto& t : threads) t.join();
  EXPECT_EQ(done.load(), 16 * 200);
  EXPECT_LE(most.load(), 3);
  EXPECT_EQ(queue.running(), 0);
}

}  // namespace
}  // namespace plumb::server
