// bench_server's scorer section: server-side Recommend against a plain memory scan and the
// scores-only product, Google Benchmark CPU-time medians (see bench_world.h).
#include <benchmark/benchmark.h>

#include <cstdio>
#include <map>
#include <string>
#include <vector>

#include "bench/server/bench_world.h"
#include "core/scan.h"
#include "server/scorer.h"

namespace plumb::server::bench {

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
  const std::vector<std::string> ids = SampledUserIds(4096);
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

}  // namespace plumb::server::bench
