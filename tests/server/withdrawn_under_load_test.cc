// Item availability under load: three clients call Recommend, SimilarItems and RankCandidates
// without pause against a real gRPC endpoint whose CatchUpLoop follows a store as a RocksDB
// secondary, while the test, acting as plumb-train, withdraws an item that every one of those
// answers contains and later restores it (Store::SetItemsWithdrawn, what ModelControl
// SetItemAvailability calls). No call may fail; every answer to a call started more than the
// bound after the withdrawal leaves the item out (RankCandidates: reports it unavailable),
// every answer to a call started more than the bound after the restore has it back, and no
// new version is published meanwhile.
#include <grpcpp/grpcpp.h>
#include <gtest/gtest.h>

#include <algorithm>
#include <atomic>
#include <chrono>
#include <mutex>
#include <thread>

#include "plumb/v1/ranker.grpc.pb.h"
#include "server/catch_up_loop.h"
#include "server/ranker_service.h"
#include "server/ranking_server.h"
#include "server/scorer.h"
#include "server/snapshot_holder.h"
#include "tests/server/loopback_server.h"
#include "tests/server/test_model.h"

namespace plumb::server {
namespace {

using Clock = std::chrono::steady_clock;

constexpr uint32_t kUsers = 30, kItems = 2000, kDim = 16;
const char* const kUser = "member-4";
// The catch-up interval of the test and the bound it allows: two intervals for the loop to
// see the change plus generous room for a loaded 2-core machine.
constexpr auto kInterval = std::chrono::milliseconds(50);
constexpr auto kBound = std::chrono::milliseconds(1500);

struct Answer {
  Clock::time_point started;
  bool has_target = false;  // Recommend / SimilarItems: in the list; RankCandidates: scored
  bool reported_unavailable = false;
  uint64_t version = 0;
};

TEST(WithdrawnUnderLoadTest, AnItemLeavesAllThreeMethodsWithinTheBoundAndComesBack) {
  testing::ScratchDir dir;
  store::StoreOptions options;
  options.sync = false;
  std::unique_ptr<store::Store> primary;
  ASSERT_TRUE(store::Store::OpenPrimary(dir.Sub("db"), options, &primary).ok());
  const testing::TestModel m = testing::RandomModel(kUsers, kItems, kDim, 5, 77, false);
  uint64_t version = 0;
  ASSERT_TRUE(testing::CommitModel(primary.get(), m, true, &version).ok());

  // The target: kUser's first recommendation; the similar-items query: the item most similar
  // to it (the target is then among that item's 50 most similar: checked below).
  auto snap = testing::BuildSnapshot(m, version);
  Scorer scorer;
  RankedList list;
  RecommendQuery rq;
  rq.user_id = kUser;
  rq.count = 10;
  ASSERT_TRUE(scorer.Recommend(*snap, rq, &list).ok());
  const std::string target = m.item_ids[list.items[0].index];
  SimilarQuery sq;
  sq.item_id = target;
  sq.count = 1;
  ASSERT_TRUE(scorer.SimilarItems(*snap, sq, &list).ok());
  const std::string similar_query = m.item_ids[list.items[0].index];
  sq.item_id = similar_query;
  sq.count = 50;
  ASSERT_TRUE(scorer.SimilarItems(*snap, sq, &list).ok());
  ASSERT_TRUE(std::any_of(list.items.begin(), list.items.end(),
                          [&](const ScoredIndex& s) { return m.item_ids[s.index] == target; }));

  CatchUpOptions follow;
  follow.interval = kInterval;
  testing::FollowingServer serving;
  ASSERT_TRUE(serving.Start(dir.Sub("db"), dir.Sub("scratch"), follow).ok());
  CatchUpLoop& loop = serving.loop();
  const std::shared_ptr<grpc::Channel> channel = serving.channel();

  std::atomic<bool> stop{false};
  std::atomic<int> failures{0};
  std::mutex mu;
  std::vector<Answer> answers[3];
  auto record = [&](int method, const Answer& a) {
    std::lock_guard<std::mutex> lock(mu);
    answers[method].push_back(a);
  };
  std::vector<std::thread> clients;
  clients.emplace_back([&] {
    auto stub = v1::Ranker::NewStub(channel);
    v1::RecommendRequest request;
    request.set_user_id(kUser);
    request.set_count(10);
    while (!stop.load()) {
      grpc::ClientContext context;
      context.set_deadline(std::chrono::system_clock::now() + std::chrono::seconds(10));
      v1::RecommendResponse response;
      Answer a{Clock::now()};
      if (grpc::Status s = stub->Recommend(&context, request, &response); !s.ok()) {
        failures.fetch_add(1);
        continue;
      }
      for (const auto& item : response.items()) a.has_target |= item.item_id() == target;
      a.version = response.model_version();
      record(0, a);
    }
  });
  clients.emplace_back([&] {
    auto stub = v1::Ranker::NewStub(channel);
    v1::SimilarItemsRequest request;
    request.set_item_id(similar_query);
    request.set_count(50);
    while (!stop.load()) {
      grpc::ClientContext context;
      context.set_deadline(std::chrono::system_clock::now() + std::chrono::seconds(10));
      v1::SimilarItemsResponse response;
      Answer a{Clock::now()};
      if (grpc::Status s = stub->SimilarItems(&context, request, &response); !s.ok()) {
        failures.fetch_add(1);
        continue;
      }
      for (const auto& item : response.items()) a.has_target |= item.item_id() == target;
      a.version = response.model_version();
      record(1, a);
    }
  });
  clients.emplace_back([&] {
    auto stub = v1::Ranker::NewStub(channel);
    v1::RankCandidatesRequest request;
    request.set_user_id(kUser);
    for (const char* c : {"tool-1", "tool-2"}) request.add_candidate_item_ids(c);
    request.add_candidate_item_ids(target);
    while (!stop.load()) {
      grpc::ClientContext context;
      context.set_deadline(std::chrono::system_clock::now() + std::chrono::seconds(10));
      v1::RankCandidatesResponse response;
      Answer a{Clock::now()};
      if (grpc::Status s = stub->RankCandidates(&context, request, &response); !s.ok()) {
        failures.fetch_add(1);
        continue;
      }
      for (const auto& item : response.items()) a.has_target |= item.item_id() == target;
      for (const auto& id : response.unavailable_item_ids()) {
        a.reported_unavailable |= id == target;
      }
      a.version = response.model_version();
      record(2, a);
    }
  });

  // Waits until each method has an answer started after `since` that satisfies `done`;
  // returns the longest of the three delays.
  auto wait_for = [&](Clock::time_point since, auto done) {
    Clock::duration longest{};
    for (int method = 0; method < 3; ++method) {
      bool seen = false;
      for (int wait = 0; wait < 1000 && !seen; ++wait) {
        {
          std::lock_guard<std::mutex> lock(mu);
          for (const Answer& a : answers[method]) {
            if (a.started > since && done(method, a)) {
              longest = std::max(longest, a.started - since);
              seen = true;
              break;
            }
          }
        }
        if (!seen) std::this_thread::sleep_for(std::chrono::milliseconds(5));
      }
      EXPECT_TRUE(seen) << "method " << method;
    }
    return longest;
  };
  auto withdrawn_answer = [](int method, const Answer& a) {
    return !a.has_target && (method != 2 || a.reported_unavailable);
  };
  auto available_answer = [](int, const Answer& a) {
    return a.has_target && !a.reported_unavailable;
  };

  std::this_thread::sleep_for(std::chrono::milliseconds(200));
  const auto withdrawn_at = Clock::now();
  store::AvailabilityChange change;
  std::vector<std::string> ids = {target};
  ASSERT_TRUE(primary->SetItemsWithdrawn(ids, true, &change).ok());
  const auto to_withdraw = wait_for(withdrawn_at, withdrawn_answer);
  std::this_thread::sleep_for(kBound + std::chrono::milliseconds(200));
  const auto restored_at = Clock::now();
  ASSERT_TRUE(primary->SetItemsWithdrawn(ids, false, &change).ok());
  const auto to_restore = wait_for(restored_at, available_answer);
  std::this_thread::sleep_for(kBound + std::chrono::milliseconds(200));
  const auto end = Clock::now();
  stop.store(true);
  for (auto& t : clients) t.join();
  loop.Stop();
  serving.server().Shutdown(std::chrono::milliseconds(1000));

  EXPECT_EQ(failures.load(), 0);
  size_t total = 0;
  for (int method = 0; method < 3; ++method) {
    size_t before = 0, during = 0, after = 0;
    for (const Answer& a : answers[method]) {
      ++total;
      EXPECT_EQ(a.version, version) << "no new version was needed";
      if (a.started < withdrawn_at) {
        EXPECT_TRUE(available_answer(method, a)) << "method " << method << " before";
        ++before;
      } else if (a.started > withdrawn_at + kBound && a.started < restored_at) {
        EXPECT_TRUE(withdrawn_answer(method, a)) << "method " << method << " while withdrawn";
        ++during;
      } else if (a.started > restored_at + kBound && a.started < end) {
        EXPECT_TRUE(available_answer(method, a)) << "method " << method << " after restore";
        ++after;
      }
    }
    EXPECT_GT(before, 0u);
    EXPECT_GT(during, 0u) << "method " << method << " was called while withdrawn";
    EXPECT_GT(after, 0u);
  }
  using std::chrono::duration;
  std::printf(
      "%zu calls; withdrawal seen by all three methods after %.0f ms, restore after "
      "%.0f ms (catch-up interval %lld ms)\n",
      total, duration<double, std::milli>(to_withdraw).count(),
      duration<double, std::milli>(to_restore).count(), static_cast<long long>(kInterval.count()));
}

}  // namespace
}  // namespace plumb::server
