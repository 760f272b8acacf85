// plumb-serve's performance figures (issue 5), each beside a reference measured in the same
// run, since the machine is shared and absolute numbers move with its load.
//
//   scorer   100,000 items x 64 dims, 200,000 users with 20 seen items each: server-side
//            Recommend (top-20, exclude seen, through Scorer exactly as the service calls it)
//            against a plain memory scan of the item matrix (sum of every float) and the
//            scores-only product. CPU time, median of repeated runs (Google Benchmark).
//   monitor  the exposure monitor's cost: Recommend as above, then the served list recorded
//            into an ExposureWindow exactly as the service does, against the same calls
//            without it; interleaved rounds (off, on, off, on, ...) of thread CPU time, and
//            the median of the per-round ratios, so machine load hits both sides alike.
//   e2e      the same catalogue behind a real gRPC server on loopback, one client:
//            Recommend p50/p99 against an "empty" RPC, the same method rejected at
//            validation (no snapshot access, no scoring), interleaved call by call.
//   load     throughput with 1, 2, 4, 8 concurrent clients (each its own channel): QPS, p50,
//            p99. Clients and server share the machine's cores.
//   fold-in  which fold-in recovers a simulated user's own top-20 best (see fold_in.h).
//   swap     a 1,000,000 x 64 version (+200,000 users) loaded from a store and swapped in
//            while another such snapshot is held: seconds and peak RSS, in a fresh process.
//
//   build/<dir>/bench/server/bench_server [--sections=scorer,monitor,e2e,load,fold-in,swap]
//                                         [google benchmark flags]
#include <benchmark/benchmark.h>
#include <grpcpp/grpcpp.h>
#include <sys/resource.h>
#include <sys/wait.h>
#include <unistd.h>

#include <Eigen/Dense>
#include <algorithm>
#include <atomic>
#include <chrono>
#include <cstdio>
#include <cstring>
#include <fstream>
#include <map>
#include <random>
#include <set>
#include <span>
#include <string>
#include <thread>
#include <vector>

#include "core/percentile.h"
#include "core/scan.h"
#include "plumb/v1/ranker.grpc.pb.h"
#include "server/exposure_window.h"
#include "server/fold_in.h"
#include "server/ranker_service.h"
#include "server/ranking_server.h"
#include "server/scorer.h"
#include "server/snapshot.h"
#include "server/snapshot_holder.h"
#include "store/store.h"

namespace plumb::server {
namespace {

constexpr uint32_t kItems = 100'000, kUsers = 200'000, kDim = 64, kSeen = 20, kTop = 20;

// A fast generator for bulk data: the figures do not depend on the distribution's fine
// shape, and std::normal_distribution would dominate setup time for 80 M values.
struct FastRandom {
  uint64_t s;
  explicit FastRandom(uint64_t seed) : s(seed * 0x9E3779B97F4A7C15ull + 1) {}
  uint64_t Next() {
    s ^= s << 13;
    s ^= s >> 7;
    s ^= s << 17;
    return s;
  }
  // Roughly normal with unit variance: sum of four uniforms, centred and scaled.
  float Gauss() {
    float sum = 0;
    for (int k = 0; k < 4; ++k) sum += static_cast<float>(Next() >> 40) / 16777216.0f;
    return (sum - 2.0f) * 1.7320508f;
  }
};

SnapshotParts RandomParts(uint64_t version, uint32_t items, uint32_t users, uint32_t seen,
                          uint64_t seed) {
  FastRandom rng(seed);
  SnapshotParts p;
  p.version = version;
  p.created_ms = 0;
  p.items = ItemMatrix(items, kDim);
  p.users = ItemMatrix(users, kDim);
  for (size_t k = 0; k < size_t{items} * kDim; ++k) p.items.data()[k] = 0.1f * rng.Gauss();
  for (size_t k = 0; k < size_t{users} * kDim; ++k) p.users.data()[k] = 0.1f * rng.Gauss();
  for (uint32_t i = 0; i < items; ++i) p.item_ids.push_back("tool-" + std::to_string(i));
  for (uint32_t u = 0; u < users; ++u) p.user_ids.push_back("member-" + std::to_string(u));
  p.item_degrees.assign(items, 0);
  p.seen_offsets.reserve(users + 1);
  p.seen_offsets.push_back(0);
  std::vector<uint32_t> s;
  for (uint32_t u = 0; u < users; ++u) {
    s.clear();
    while (s.size() < seen) s.push_back(static_cast<uint32_t>(rng.Next() % items));
    std::sort(s.begin(), s.end());
    s.erase(std::unique(s.begin(), s.end()), s.end());
    for (uint32_t i : s) ++p.item_degrees[i];
    p.seen_items.insert(p.seen_items.end(), s.begin(), s.end());
    p.seen_offsets.push_back(p.seen_items.size());
  }
  return p;
}

std::shared_ptr<const Snapshot>& World() {
  static std::shared_ptr<const Snapshot> snap = [] {
    std::shared_ptr<const Snapshot> s;
    if (!Snapshot::Build(RandomParts(1, kItems, kUsers, kSeen, 42), &s).ok()) std::abort();
    return s;
  }();
  return snap;
}

// ---- scorer ------------------------------------------------------------------------------

void BM_PlainScan(benchmark::State& state) {
  const MatrixView m = World()->items();
  const size_t n = m.rows * m.dim;
  for (auto _ : state) {
    float acc[16] = {};
    for (size_t i = 0; i < n; i += 16)
      for (size_t j = 0; j < 16; ++j) acc[j] += m.data[i + j];
    float total = 0;
    for (float a : acc) total += a;
    benchmark::DoNotOptimize(total);
  }
}

void BM_DotScoresOnly(benchmark::State& state) {
  const Snapshot& snap = *World();
  std::vector<float> scores(kItems);
  uint32_t u = 0;
  for (auto _ : state) {
    if (!dot_scores(snap.items(), snap.user_vector(u), scores).ok()) state.SkipWithError("dot");
    u = (u + 7919) % kUsers;
    benchmark::DoNotOptimize(scores.data());
    benchmark::ClobberMemory();
  }
}

void BM_Recommend(benchmark::State& state) {
  const Snapshot& snap = *World();
  Scorer scorer;
  RankedList out;
  std::vector<std::string> ids;
  for (uint32_t k = 0; k < 4096; ++k)
    ids.push_back("member-" + std::to_string((k * 7919u) % kUsers));
  size_t k = 0;
  for (auto _ : state) {
    RecommendQuery q;
    q.user_id = ids[k++ % ids.size()];
    q.count = kTop;
    q.exclude_seen = true;
    if (!scorer.Recommend(snap, q, &out).ok()) state.SkipWithError("recommend");
    benchmark::DoNotOptimize(out.items.data());
  }
}

constexpr int kRepetitions = 9;
void Common(benchmark::internal::Benchmark* b) {
  b->Unit(benchmark::kMicrosecond)->Repetitions(kRepetitions)->ReportAggregatesOnly(true);
}
BENCHMARK(BM_PlainScan)->Apply(Common);
BENCHMARK(BM_DotScoresOnly)->Apply(Common);
BENCHMARK(BM_Recommend)->Apply(Common);

class MedianReporter : public benchmark::ConsoleReporter {
 public:
  MedianReporter() : ConsoleReporter(OO_Tabular) {}
  void ReportRuns(const std::vector<Run>& runs) override {
    for (const Run& run : runs) {
      if (run.run_type == Run::RT_Aggregate && run.aggregate_name == "median") {
        median_us_[run.benchmark_name().substr(0, run.benchmark_name().find('/'))] =
            run.GetAdjustedCPUTime();
      }
    }
    ConsoleReporter::ReportRuns(runs);
  }
  double median_us(const std::string& name) const {
    auto it = median_us_.find(name);
    return it == median_us_.end() ? 0 : it->second;
  }

 private:
  std::map<std::string, double> median_us_;
};

void ScorerSection(int argc, char** argv) {
  World();  // build before timing
  MedianReporter reporter;
  benchmark::RunSpecifiedBenchmarks(&reporter);
  const double scan = reporter.median_us("BM_PlainScan"),
               dots = reporter.median_us("BM_DotScoresOnly"),
               rec = reporter.median_us("BM_Recommend");
  std::printf(
      "\n[scorer] %u items x %u dims (%.1f MB), %u users x %u seen, top-%u, CPU time medians\n",
      kItems, kDim, kItems * kDim * 4 / 1e6, kUsers, kSeen, kTop);
  std::printf("  plain memory scan  %8.1f us  (%.2f GB/s)\n", scan, kItems * kDim * 4 / scan / 1e3);
  std::printf("  scores only        %8.1f us  (%.2fx scan)\n", dots, dots / scan);
  std::printf("  Recommend          %8.1f us  (%.2fx scan; targets: < 1000 us, <= 1.5x)\n", rec,
              rec / scan);
}

// ---- monitor ----------------------------------------------------------------------------

double ThreadCpuSeconds() {
  timespec ts{};
  clock_gettime(CLOCK_THREAD_CPUTIME_ID, &ts);
  return static_cast<double>(ts.tv_sec) + static_cast<double>(ts.tv_nsec) * 1e-9;
}

void MonitorSection() {
  const Snapshot& snap = *World();
  Scorer scorer;
  ExposureWindow window(ExposureWindowOptions{});  // the server's defaults
  RankedList out;
  std::vector<uint32_t> indexes;
  std::vector<std::string> ids;
  for (uint32_t k = 0; k < 4096; ++k)
    ids.push_back("member-" + std::to_string((k * 7919u) % kUsers));
  size_t next = 0;
  // One round: `calls` Recommend calls, each followed (monitor on) by the same Record the
  // service makes (RankerService::RecordExposure). Returns thread CPU seconds per call.
  auto round = [&](bool monitor, int calls) {
    const double start = ThreadCpuSeconds();
    for (int c = 0; c < calls; ++c) {
      RecommendQuery q;
      q.user_id = ids[next++ % ids.size()];
      q.count = kTop;
      q.exclude_seen = true;
      if (!scorer.Recommend(snap, q, &out).ok()) std::abort();
      if (monitor) {
        indexes.clear();
        for (const ScoredIndex& item : out.items) indexes.push_back(item.index);
        window.Record(snap, indexes);
      }
    }
    return (ThreadCpuSeconds() - start) / calls;
  };
  round(true, 300);  // warm-up: the window's per-version arrays are built on first use
  round(false, 300);
  constexpr int kRounds = 41, kCalls = 200;
  std::vector<double> off, on, ratio;
  for (int r = 0; r < kRounds; ++r) {
    // Alternate which side goes first, so a drift in machine load does not favour one.
    double a, b;
    if (r % 2 == 0) {
      a = round(false, kCalls);
      b = round(true, kCalls);
    } else {
      b = round(true, kCalls);
      a = round(false, kCalls);
    }
    off.push_back(a);
    on.push_back(b);
    ratio.push_back(b / a);
  }
  auto median = [](std::vector<double> v) {  // nearest rank: the middle one of 41 rounds
    std::sort(v.begin(), v.end());
    return NearestRankPercentile(std::span<const double>(v), 50);
  };
  // The monitor's own work, isolated: Record of a top-20 list, many times.
  const double record_start = ThreadCpuSeconds();
  constexpr int kRecords = 200000;
  for (int r = 0; r < kRecords; ++r) window.Record(snap, indexes);
  const double record_us = (ThreadCpuSeconds() - record_start) / kRecords * 1e6;
  const double m_off = median(off) * 1e6, m_on = median(on) * 1e6, m_ratio = median(ratio);
  std::printf(
      "\n[monitor] server-side Recommend (top-%u, exclude seen, %u x %u), %d interleaved rounds "
      "of %d calls, thread CPU time\n",
      kTop, kItems, kDim, kRounds, kCalls);
  std::printf("  monitor off        %8.1f us per call (median round)\n", m_off);
  std::printf("  monitor on         %8.1f us per call (median round)\n", m_on);
  std::printf("  on / off           %8.4f median of per-round ratios (%+.2f%%; target < +3%%)\n",
              m_ratio, (m_ratio - 1.0) * 100.0);
  std::printf("  Record alone       %8.3f us per top-%u list\n", record_us, kTop);
}

// ---- e2e and load ------------------------------------------------------------------------

struct Percentiles {
  double p50, p99;
};
// Nearest-rank percentiles (core/percentile.h), the definition of every figure plumb reports.
Percentiles Summarise(std::vector<double> us) {
  std::sort(us.begin(), us.end());
  const std::span<const double> ascending(us);
  return {NearestRankPercentile(ascending, 50), NearestRankPercentile(ascending, 99)};
}

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
  r.set_user_id("member-" + std::to_string((k * 7919u) % kUsers));
  r.set_count(kTop);
  // include_seen unset: seen items left out (the default).
  return r;
}

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
    for (auto& l : lat) (void)l;  // samples before the window are kept: negligible share
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

// ---- fold-in -----------------------------------------------------------------------------

// Simulated users in a catalogue with a popularity direction: q_i = g_i/sqrt(d) + w·a_i·v
// with a_i ~ Gamma(1,1) along one unit vector v (w = 0 or 0.5), true user vectors
// p_u ~ N(0, 4/d), interactions drawn without replacement with probability ∝ exp(8<p_u,q_i>).
void FoldInSection() {
  const uint32_t n = 20000, d = 64, users = 150;
  std::printf(
      "\n[fold-in] overlap@20 of a folded-in user's top-20 with their own (both without the\n"
      "  interacted items); %u items x %u dims, %u users per row; higher is better\n",
      n, d, users);
  std::printf("  %6s %4s %10s %12s %12s %10s\n", "pop_w", "M", "served", "ls_pos_best", "bpr_steps",
              "random");
  std::mt19937_64 rng(3);
  std::normal_distribution<double> gauss(0, 1);
  std::gamma_distribution<double> gamma(1.0, 1.0);
  for (double pop_w : {0.0, 0.5}) {
    ItemMatrix items(n, d);
    Eigen::VectorXd v(d);
    for (uint32_t k = 0; k < d; ++k) v[k] = gauss(rng);
    v.normalize();
    for (uint32_t i = 0; i < n; ++i) {
      const double a = gamma(rng);
      for (uint32_t k = 0; k < d; ++k)
        items.mutable_row(i)[k] = static_cast<float>(gauss(rng) / std::sqrt(d) + pop_w * a * v[k]);
    }
    std::vector<double> gram(d * d);
    if (!item_gram(items.view(), gram).ok()) std::abort();
    using MatF = Eigen::Matrix<float, Eigen::Dynamic, Eigen::Dynamic, Eigen::RowMajor>;
    Eigen::Map<const MatF> q(items.data(), n, d);
    for (uint32_t m_count : {5u, 20u, 100u}) {
      double sums[4] = {};
      double ls_sums[3] = {};
      const float kRidges[3] = {0.01f, 0.1f, 1.0f};
      for (uint32_t u = 0; u < users; ++u) {
        Eigen::VectorXf p(d);
        for (uint32_t k = 0; k < d; ++k) p[k] = static_cast<float>(gauss(rng) * 2 / std::sqrt(d));
        Eigen::VectorXf s = q * p;
        std::vector<double> w(n);
        const float top = s.maxCoeff();
        for (uint32_t i = 0; i < n; ++i) w[i] = std::exp(8.0 * (s[i] - top));
        std::vector<uint32_t> rows;
        while (rows.size() < m_count) {
          std::discrete_distribution<uint32_t> draw(w.begin(), w.end());
          const uint32_t i = draw(rng);
          rows.push_back(i);
          w[i] = 0;
        }
        std::sort(rows.begin(), rows.end());
        auto top20 = [&](const Eigen::VectorXf& vec) {
          Eigen::VectorXf sc = q * vec;
          for (uint32_t i : rows) sc[i] = -1e30f;
          std::vector<uint32_t> idx(n);
          for (uint32_t i = 0; i < n; ++i) idx[i] = i;
          std::partial_sort(idx.begin(), idx.begin() + 20, idx.end(),
                            [&](uint32_t a, uint32_t b) { return sc[a] > sc[b]; });
          return std::set<uint32_t>(idx.begin(), idx.begin() + 20);
        };
        const std::set<uint32_t> truth = top20(p);
        auto overlap = [&](const Eigen::VectorXf& vec) {
          int hits = 0;
          for (uint32_t i : top20(vec)) hits += truth.count(i);
          return hits / 20.0;
        };
        // 1. served: implicit-feedback least squares with the whole catalogue.
        Eigen::VectorXf served(d);
        if (!fold_in_user(items.view(), gram, rows, FoldInOptions{},
                          std::span<float>(served.data(), d))
                 .ok())
          std::abort();
        sums[0] += overlap(served);
        // 2. least squares on the user's items only, with a ridge of 0.01, 0.1 or 1 times the
        //    mean eigenvalue of QᵣᵀQᵣ; the table shows the best of the three for each row.
        Eigen::MatrixXf qr(rows.size(), d);
        for (size_t j = 0; j < rows.size(); ++j) qr.row(j) = q.row(rows[j]);
        const Eigen::MatrixXf qtq = qr.transpose() * qr;
        const Eigen::VectorXf rhs = qr.transpose() * Eigen::VectorXf::Ones(rows.size());
        for (int r = 0; r < 3; ++r) {
          Eigen::MatrixXf a = qtq;
          a.diagonal().array() += kRidges[r] * qtq.trace() / d + 1e-6f;
          ls_sums[r] += overlap(Eigen::VectorXf(a.ldlt().solve(rhs)));
        }
        // 3. 30 BPR gradient steps from zero, one uniform negative per positive per step.
        Eigen::VectorXf g = Eigen::VectorXf::Zero(d);
        std::uniform_int_distribution<uint32_t> any(0, n - 1);
        for (int step = 0; step < 30; ++step) {
          Eigen::VectorXf grad = Eigen::VectorXf::Zero(d);
          for (uint32_t i : rows) {
            Eigen::VectorXf diff = q.row(i).transpose() - q.row(any(rng)).transpose();
            const float margin = g.dot(diff);
            grad += diff / (1.0f + std::exp(margin));
          }
          g += 5.0f * (grad / static_cast<float>(rows.size()) - 0.01f * g);
        }
        sums[2] += overlap(g);
        // 4. reference: an unrelated random vector.
        Eigen::VectorXf r(d);
        for (uint32_t k = 0; k < d; ++k) r[k] = static_cast<float>(gauss(rng));
        sums[3] += overlap(r);
      }
      sums[1] = *std::max_element(ls_sums, ls_sums + 3);
      std::printf("  %6.1f %4u %10.3f %12.3f %12.3f %10.3f\n", pop_w, m_count, sums[0] / users,
                  sums[1] / users, sums[2] / users, sums[3] / users);
    }
  }
}

// ---- swap --------------------------------------------------------------------------------

double ProcessCpuSeconds() {
  rusage r;
  getrusage(RUSAGE_SELF, &r);  // both loading threads
  return r.ru_utime.tv_sec + r.ru_utime.tv_usec / 1e6 + r.ru_stime.tv_sec +
         r.ru_stime.tv_usec / 1e6;
}

std::string LoadAverage() {
  std::ifstream in("/proc/loadavg");
  std::string one;
  in >> one;
  return one;
}

long StatusKb(const char* field) {
  std::ifstream in("/proc/self/status");
  std::string line;
  while (std::getline(in, line)) {
    if (line.rfind(field, 0) == 0) return std::stol(line.substr(std::strlen(field)));
  }
  return -1;
}

template <typename F>
int InChild(F f) {
  const pid_t pid = fork();
  if (pid == 0) {
    const int code = f();
    std::fflush(stdout);  // _exit skips stdio buffers
    _exit(code);
  }
  int status = 0;
  waitpid(pid, &status, 0);
  return WIFEXITED(status) ? WEXITSTATUS(status) : 99;
}

void SwapSection() {
  constexpr uint32_t kBigItems = 1'000'000, kBigUsers = 200'000, kBigSeen = 10;
  char dir_template[] = "/tmp/plumb-bench-swap-XXXXXX";
  const std::string dir = mkdtemp(dir_template);
  std::printf("\n[swap] %u items x %u dims, %u users, %u interactions each; store in %s\n",
              kBigItems, kDim, kBigUsers, kBigSeen, dir.c_str());
  std::fflush(stdout);
  // Writing the store happens in its own process so that none of its memory is counted.
  int rc = InChild([&] {
    store::StoreOptions options;
    options.sync = false;
    std::unique_ptr<store::Store> primary;
    if (!store::Store::OpenPrimary(dir + "/db", options, &primary).ok()) return 1;
    for (uint64_t seed : {1, 2}) {
      SnapshotParts p = RandomParts(seed, kBigItems, kBigUsers, kBigSeen, seed);
      store::StateChange change;
      std::vector<uint32_t> degrees(p.item_degrees.begin(), p.item_degrees.end());
      if (seed == 1) {
        for (uint32_t u = 0; u < kBigUsers; ++u) change.new_users.emplace_back(u, p.user_ids[u]);
        for (uint32_t i = 0; i < kBigItems; ++i) change.new_items.emplace_back(i, p.item_ids[i]);
        for (uint32_t u = 0; u < kBigUsers; ++u)
          for (uint64_t j = p.seen_offsets[u]; j < p.seen_offsets[u + 1]; ++j)
            change.new_interactions.emplace_back(u, p.seen_items[j]);
      }
      store::VersionWrite write;
      write.manifest.objective = "cpr";
      write.manifest.num_users = kBigUsers;
      write.manifest.num_items = kBigItems;
      write.manifest.dim = kDim;
      write.manifest.num_interactions = p.seen_items.size();
      write.users = {p.users.data(), kBigUsers, kDim};
      write.items = {p.items.data(), kBigItems, kDim};
      write.item_degrees = degrees;
      change.version = &write;
      change.activate_published = seed == 1;
      Status s = primary->Commit(change);
      if (!s.ok()) {
        std::fprintf(stderr, "commit: %s\n", s.ToString().c_str());
        return 1;
      }
    }
    return 0;
  });
  if (rc != 0) {
    std::printf("  store setup failed\n");
    return;
  }
  rc = InChild([&] {
    const long rss_exec = StatusKb("VmRSS:");
    std::unique_ptr<store::Store> secondary;
    if (!store::Store::OpenSecondary(dir + "/db", dir + "/scratch", &secondary).ok()) return 1;
    SnapshotHolder holder;
    const long rss_start = StatusKb("VmRSS:");
    std::shared_ptr<const Snapshot> first;
    auto t0 = std::chrono::steady_clock::now();
    if (!LoadSnapshot(*secondary, 1, &first).ok()) return 2;
    holder.Swap(first);
    const double first_s =
        std::chrono::duration<double>(std::chrono::steady_clock::now() - t0).count();
    const size_t first_bytes = first->memory_bytes();
    first.reset();
    // A request still holds version 1 during the whole swap, as in-flight requests would.
    std::shared_ptr<const Snapshot> in_flight = holder.Get();
    const long rss_before = StatusKb("VmRSS:");
    std::ofstream("/proc/self/clear_refs") << "5";  // reset the peak (VmHWM) to the current RSS
    t0 = std::chrono::steady_clock::now();
    const double cpu0 = ProcessCpuSeconds();
    std::shared_ptr<const Snapshot> next;
    Status s = LoadSnapshot(*secondary, 2, &next);
    if (!s.ok()) return 3;
    const size_t next_bytes = next->memory_bytes();
    holder.Swap(std::move(next));
    const double swap_s =
        std::chrono::duration<double>(std::chrono::steady_clock::now() - t0).count();
    const double swap_cpu = ProcessCpuSeconds() - cpu0;
    const long peak = StatusKb("VmHWM:");
    in_flight.reset();
    const double mb = 1024.0;
    std::printf("  first load (nothing held)      %.2f s\n", first_s);
    std::printf(
        "  load + swap of the second      %.2f s wall, %.2f s CPU (target < 3 s; load average "
        "%s)\n",
        swap_s, swap_cpu, LoadAverage().c_str());
    std::printf("  snapshot sizes                 %.0f MB + %.0f MB\n", first_bytes / 1e6,
                next_bytes / 1e6);
    std::printf(
        "  RSS: process %.0f MB, + RocksDB secondary opened %.0f MB, holding one snapshot %.0f "
        "MB,\n"
        "       peak during the swap %.0f MB (%.0f MB above the open secondary)\n",
        rss_exec / mb, rss_start / mb, rss_before / mb, peak / mb, (peak - rss_start) / mb);
    std::printf(
        "  peak vs 2 x (both snapshots) + 150 MB = %.0f MB: %s\n",
        2 * (first_bytes + next_bytes) / 1e6 + 150,
        peak / mb * 1.048576 < 2 * (first_bytes + next_bytes) / 1e6 + 150 ? "under" : "OVER");
    std::printf("  peak vs both snapshots + 150 MB = %.0f MB: %s\n",
                (first_bytes + next_bytes) / 1e6 + 150,
                peak / mb * 1.048576 < (first_bytes + next_bytes) / 1e6 + 150 ? "under" : "over");
    return 0;
  });
  if (rc != 0) std::printf("  measurement failed (%d)\n", rc);
  std::string cleanup = "rm -rf " + dir;
  if (std::system(cleanup.c_str()) != 0) std::printf("  could not remove %s\n", dir.c_str());
}

}  // namespace
}  // namespace plumb::server

int main(int argc, char** argv) {
  std::string sections = "scorer,monitor,e2e,load,fold-in,swap";
  std::vector<char*> rest;
  for (int i = 0; i < argc; ++i) {
    if (std::strncmp(argv[i], "--sections=", 11) == 0) {
      sections = argv[i] + 11;
    } else {
      rest.push_back(argv[i]);
    }
  }
  int rest_argc = static_cast<int>(rest.size());
  benchmark::Initialize(&rest_argc, rest.data());
  auto wants = [&](const char* s) {
    return ("," + sections + ",").find("," + std::string(s) + ",") != std::string::npos;
  };
  // The swap runs first, in child processes, before this process holds any data.
  if (wants("swap")) plumb::server::SwapSection();
  if (wants("scorer")) plumb::server::ScorerSection(rest_argc, rest.data());
  if (wants("monitor")) plumb::server::MonitorSection();
  if (wants("e2e")) plumb::server::E2eSection();
  if (wants("load")) plumb::server::LoadSection();
  if (wants("fold-in")) plumb::server::FoldInSection();
  benchmark::Shutdown();
  return 0;
}
