// Hot swap under load: four clients call Recommend without pause while the test, acting as
// the trainer, publishes new versions into the store; the server under test follows it as a
// RocksDB secondary. No request may fail, every answer must come from a version that was
// active at some moment and match that version's model, and no client may see versions go
// backwards. Run twice: with the exact scan, and with the approximate indexes that large
// catalogues get (built by the catch-up loop for each new version before its swap).
#include <grpcpp/grpcpp.h>
#include <gtest/gtest.h>

#include <atomic>
#include <map>
#include <mutex>
#include <set>
#include <thread>

#include "plumb/v1/ranker.grpc.pb.h"
#include "server/catch_up_loop.h"
#include "server/ranker_service.h"
#include "server/ranking_server.h"
#include "server/snapshot_holder.h"
#include "tests/server/expected_top.h"
#include "tests/server/loopback_server.h"
#include "tests/server/test_model.h"

namespace plumb::server {
namespace {

using testing::TestModel;

constexpr uint32_t kUsers = 40, kItems = 3000, kDim = 16, kTop = 5;
const char* const kUser = "member-7";

// Each version's model differs (seeded by a number of the test's choosing), so an answer
// can be checked against the model it claims to come from.
// The interaction sets stay the same: the store keeps them live across versions (a
// snapshot's seen items are the store's, not the version's), so changing them per version
// would make the expected answer depend on when a version was loaded.
TestModel ModelForSeed(uint64_t seed) {
  TestModel m = testing::RandomModel(kUsers, kItems, kDim, 0, seed, false);
  const TestModel interactions = testing::RandomModel(kUsers, kItems, 1, 10, 999, false);
  m.seen = interactions.seen;
  m.degrees = interactions.degrees;
  return m;
}

struct Observation {
  uint64_t version;
  std::vector<std::string> ids;
};

class HotSwapTest : public ::testing::TestWithParam<bool> {};

TEST_P(HotSwapTest, FourClientsSeeOnlyActiveVersionsInOrderWithoutAFailure) {
  ApproxServingOptions approx;  // min_items 0: exact only
  if (GetParam()) {
    approx.min_items = 1;
    approx.index.build_threads = 1;
    approx.index.build_breadth = 64;  // a quicker build; the answers are checked exactly
  }
  testing::ScratchDir dir;
  store::StoreOptions options;
  options.sync = false;
  std::unique_ptr<store::Store> primary;
  ASSERT_TRUE(store::Store::OpenPrimary(dir.Sub("db"), options, &primary).ok());

  std::map<uint64_t, std::vector<std::string>> expected;  // active versions only
  std::set<uint64_t> inactive;
  auto publish = [&](uint64_t seed, bool activate) {
    const TestModel m = ModelForSeed(seed);
    uint64_t v = 0;
    Status s = testing::CommitModel(primary.get(), m, activate, &v);
    EXPECT_TRUE(s.ok()) << s.ToString();
    if (activate) {
      // With approximate indexes the snapshot is built with the same options (one build
      // thread: the graph, and so the answer, is then the same for the same rows).
      expected[v] = testing::ExpectedTop(*testing::BuildSnapshot(m, 1, approx), kUser, kTop);
    } else {
      inactive.insert(v);
    }
    return v;
  };
  publish(1000, true);

  CatchUpOptions follow;
  follow.interval = std::chrono::milliseconds(10);
  follow.approx = approx;
  testing::FollowingServer serving;
  ASSERT_TRUE(serving.Start(dir.Sub("db"), dir.Sub("scratch"), follow).ok());
  SnapshotHolder& holder = serving.holder();
  CatchUpLoop& loop = serving.loop();
  const std::shared_ptr<grpc::Channel> channel = serving.channel();

  std::atomic<bool> stop{false};
  std::atomic<int> failures{0};
  std::atomic<uint64_t> latest[4] = {0, 0, 0, 0};  // each client's last version seen
  std::vector<std::vector<Observation>> seen(4);
  std::vector<std::thread> clients;
  for (int c = 0; c < 4; ++c) {
    clients.emplace_back([&, c] {
      auto stub = v1::Ranker::NewStub(channel);
      v1::RecommendRequest request;
      request.set_user_id(kUser);
      request.set_count(kTop);
      // include_seen unset: seen items left out, the default the expectation assumes.
      while (!stop.load()) {
        grpc::ClientContext context;
        context.set_deadline(std::chrono::system_clock::now() + std::chrono::seconds(10));
        v1::RecommendResponse response;
        grpc::Status s = stub->Recommend(&context, request, &response);
        if (!s.ok()) {
          failures.fetch_add(1);
          ADD_FAILURE() << "client " << c << ": " << s.error_message();
          continue;
        }
        Observation o{response.model_version(), {}};
        for (const auto& item : response.items()) o.ids.push_back(item.item_id());
        latest[c].store(o.version);
        seen[c].push_back(std::move(o));
      }
    });
  }

  // The trainer: 12 activated versions, with a published-but-inactive one after every third
  // (the server must never serve those), at a pace that lets the server swap many of them.
  uint64_t last = 0;
  for (int k = 1; k <= 12; ++k) {
    std::this_thread::sleep_for(std::chrono::milliseconds(40));
    last = publish(1000 + k, true);
    if (k % 3 == 0) publish(5000 + k, false);
  }
  bool reached_last = false;
  for (int wait = 0; wait < 1000 && !reached_last; ++wait) {
    reached_last = holder.Get()->version() == last;
    std::this_thread::sleep_for(std::chrono::milliseconds(10));
  }
  EXPECT_TRUE(reached_last);
  // Every client gets at least one answer from the last version before the clients stop.
  for (int wait = 0; wait < 1000; ++wait) {
    bool all = true;
    for (auto& l : latest) all = all && l.load() == last;
    if (all) break;
    std::this_thread::sleep_for(std::chrono::milliseconds(10));
  }
  stop.store(true);
  for (auto& t : clients) t.join();
  loop.Stop();
  serving.server().Shutdown(std::chrono::milliseconds(1000));

  EXPECT_EQ(failures.load(), 0);
  std::set<uint64_t> versions_served;
  size_t total = 0;
  for (int c = 0; c < 4; ++c) {
    ASSERT_FALSE(seen[c].empty());
    total += seen[c].size();
    uint64_t previous = 0;
    for (const Observation& o : seen[c]) {
      ASSERT_GE(o.version, previous) << "client " << c << " went back in versions";
      previous = o.version;
      ASSERT_FALSE(inactive.count(o.version)) << "served inactive version " << o.version;
      auto it = expected.find(o.version);
      ASSERT_NE(it, expected.end()) << "served a version never active: " << o.version;
      ASSERT_EQ(o.ids, it->second) << "answer does not match version " << o.version;
      versions_served.insert(o.version);
    }
    EXPECT_EQ(seen[c].back().version, last) << "client " << c;
  }
  std::printf("%zu requests, %zu distinct versions served, %llu swaps, %llu failed loads\n", total,
              versions_served.size(), static_cast<unsigned long long>(loop.swaps()),
              static_cast<unsigned long long>(loop.failed_loads()));
  EXPECT_GE(versions_served.size(), 3u);  // swaps really happened under load
  if (GetParam()) {
    EXPECT_NE(holder.Get()->dot_index(), nullptr);
  }
}

INSTANTIATE_TEST_SUITE_P(ExactAndApproximate, HotSwapTest, ::testing::Bool(),
                         [](const ::testing::TestParamInfo<bool>& p) {
                           return p.param ? "Approximate" : "Exact";
                         });

}  // namespace
}  // namespace plumb::server
