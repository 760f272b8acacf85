// bench_server's e2e and load sections: Recommend through a real gRPC server on loopback,
// one client against an empty RPC, then 1 to 8 concurrent clients (see bench_world.h).
#include <grpcpp/grpcpp.h>

#include <atomic>
#include <chrono>
#include <cstdio>
#include <cstdlib>
#include <memory>
#include <string>
#include <thread>
#include <vector>

#include "bench/server/bench_world.h"
#include "plumb/v1/ranker.grpc.pb.h"
#include "server/ranker_service.h"
#include "server/ranking_server.h"
#include "server/scorer.h"
#include "server/snapshot_holder.h"

namespace plumb::server::bench {

namespace {

struct LoopbackServer {
  SnapshotHolder holder;
  Scorer scorer;
  std::unique_ptr<RankerService> service;
  std::unique_ptr<RankingServer> server;
  std::string target;

  LoopbackServer() {
    holder.Swap(World());
    service = std::make_unique<RankerService>(&holder, &scorer, RankerLimits{}, nullptr, nullptr);
    EndpointOptions options;
    options.listen = "127.0.0.1:0";
    if (!RankingServer::Start(options, service.get(), &server).ok()) std::abort();
    server->SetServing(true);
    target = "127.0.0.1:" + std::to_string(server->port());
  }
};

double CallUs(v1::Ranker::Stub* stub, const v1::RecommendRequest& request, bool* ok) {
  grpc::ClientContext context;
  v1::RecommendResponse response;
  const auto t0 = std::chrono::steady_clock::now();
  grpc::Status s = stub->Recommend(&context, request, &response);
  const auto t1 = std::chrono::steady_clock::now();
  *ok = s.ok();
  return std::chrono::duration<double, std::micro>(t1 - t0).count();
}

v1::RecommendRequest RealRequest(uint32_t k) {
  v1::RecommendRequest r;
  r.set_user_id(SampledUserId(k));
  r.set_count(kTop);
  // include_seen unset: seen items left out (the default).
  return r;
}

}  // namespace

void E2eSection() {
  LoopbackServer server;
  auto stub =
      v1::Ranker::NewStub(grpc::CreateChannel(server.target, grpc::InsecureChannelCredentials()));
  v1::RecommendRequest empty;
  empty.set_user_id("member-1");
  empty.set_count(0);  // INVALID_ARGUMENT at validation
  std::vector<double> real_us, empty_us;
  bool ok;
  for (int k = 0; k < 200; ++k) CallUs(stub.get(), RealRequest(k), &ok);  // warm up
  int failures = 0;
  for (uint32_t k = 0; k < 3000; ++k) {
    real_us.push_back(CallUs(stub.get(), RealRequest(k), &ok));
    failures += !ok;
    empty_us.push_back(CallUs(stub.get(), empty, &ok));
  }
  const Percentiles r = Summarise(real_us), e = Summarise(empty_us);
  std::printf("\n[e2e] loopback, one client, 3000 calls each, interleaved (wall time)\n");
  std::printf("  empty RPC  p50 %7.0f us  p99 %7.0f us\n", e.p50, e.p99);
  std::printf(
      "  Recommend  p50 %7.0f us  p99 %7.0f us  (p50 - empty p50 = %.0f us; target <= 1500 us)"
      "  failures %d\n",
      r.p50, r.p99, r.p50 - e.p50, failures);
}

void LoadSection() {
  LoopbackServer server;
  std::printf(
      "\n[load] Recommend top-%u exclude-seen, %u items; each client its own channel, 4 s per "
      "row\n",
      kTop, kItems);
  std::printf("  %7s %9s %9s %9s %9s\n", "clients", "QPS", "p50_us", "p99_us", "failures");
  for (int clients : {1, 2, 4, 8}) {
    std::atomic<bool> stop{false};
    std::vector<std::vector<double>> lat(clients);
    std::atomic<int> failures{0};
    std::vector<std::thread> threads;
    for (int c = 0; c < clients; ++c) {
      threads.emplace_back([&, c] {
        auto stub = v1::Ranker::NewStub(
            grpc::CreateCustomChannel(server.target, grpc::InsecureChannelCredentials(), [c] {
              grpc::ChannelArguments a;
              a.SetInt("plumb.bench.client", c);  // distinct args: a separate connection
              return a;
            }()));
        bool ok;
        for (uint32_t k = c * 100000u; !stop.load(std::memory_order_relaxed); ++k) {
          lat[c].push_back(CallUs(stub.get(), RealRequest(k), &ok));
          if (!ok) failures.fetch_add(1);
        }
      });
    }
    std::this_thread::sleep_for(std::chrono::milliseconds(500));  // warm up
    // Samples from the warm-up stay in the percentiles: a negligible share of each row.
    const auto t0 = std::chrono::steady_clock::now();
    size_t before = 0;
    for (auto& l : lat) before += l.size();
    std::this_thread::sleep_for(std::chrono::seconds(4));
    size_t after = 0;
    for (auto& l : lat) after += l.size();
    const double seconds =
        std::chrono::duration<double>(std::chrono::steady_clock::now() - t0).count();
    stop.store(true);
    for (auto& t : threads) t.join();
    std::vector<double> all;
    for (auto& l : lat) all.insert(all.end(), l.begin(), l.end());
    const Percentiles p = Summarise(all);
    std::printf("  %7d %9.0f %9.0f %9.0f %9d\n", clients, (after - before) / seconds, p.p50, p.p99,
                failures.load());
  }
}

}  // namespace plumb::server::bench
