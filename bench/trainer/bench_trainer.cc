// Training-core benchmarks. Run: build/<dir>/bench/trainer/bench_trainer
//
//   BM_Train/<objective>          one-thread training throughput at d = 64 on a biased
//                                 synthetic world (20k members, 10k tools, ~500k pairs),
//                                 Adagrad; counter positives_per_s counts observed
//                                 interactions used (a CPR sample of k uses k).
//   BM_CprVsBprCost               CPR (k=2, beta=1) and BPR timed alternately in one run;
//                                 cpr_over_bpr is CPR's cost per interaction over BPR's.
//   BM_Membership/<structure>     the "has u seen i?" test the samplers ask, on the same
//                                 world: sorted vector + binary search (what Interactions
//                                 uses) against std::unordered_set per user.
//   BM_Synth1M                    generating a world with ~1M observed interactions.
#include <benchmark/benchmark.h>

#include <chrono>
#include <cstdio>
#include <memory>
#include <unordered_set>
#include <vector>

#include "trainer/synth.h"
#include "trainer/trainer.h"

namespace plumb::trainer {
namespace {

struct World {
  SynthWorld world;
  Interactions train;
};

const World& SharedWorld() {
  static const World* w = [] {
    auto* out = new World;
    SynthOptions o;
    o.users = 20000;
    o.items = 10000;
    o.target_interactions = 500000;
    o.test_items_per_user = 0;
    o.seed = 3;
    if (!GenerateSynthWorld(o, &out->world).ok() ||
        !out->world.TrainInteractions(&out->train).ok()) {
      std::fprintf(stderr, "world generation failed\n");
      std::abort();
    }
    return out;
  }();
  return *w;
}

struct Setup {
  ObjectiveKind kind;
  uint32_t k;
  double mix_share;
  double beta;
  OptimizerKind optimizer;
};

std::unique_ptr<FitLoop> MakeLoop(const Setup& s, Embeddings* model) {
  const World& w = SharedWorld();
  if (!Embeddings::Create(64, w.train.num_users(), w.train.num_items(), 1, model).ok())
    std::abort();
  TrainOptions o;
  o.objective = s.kind;
  o.cpr_k = s.k;
  o.cpr_mix_share = s.mix_share;
  o.beta = s.beta;
  o.optimizer = s.optimizer;
  o.batch_size = 1024;
  o.threads = 1;
  std::unique_ptr<FitLoop> loop;
  if (!FitLoop::Create(o, model, &w.train, &loop).ok()) std::abort();
  return loop;
}

void BM_Train(benchmark::State& state, Setup setup) {
  Embeddings model;
  auto loop = MakeLoop(setup, &model);
  uint64_t positives = 0, samples = 0;
  for (auto _ : state) {
    FitProgress p;
    if (!loop->RunBatches(50,
                          [&](const FitProgress& x) {
                            p = x;
                            return true;
                          })
             .ok()) {
      state.SkipWithError("training failed");
      break;
    }
    positives += p.positives;
    samples += p.samples;
  }
  state.counters["positives_per_s"] =
      benchmark::Counter(static_cast<double>(positives), benchmark::Counter::kIsRate);
  state.counters["samples_per_s"] =
      benchmark::Counter(static_cast<double>(samples), benchmark::Counter::kIsRate);
}

BENCHMARK_CAPTURE(BM_Train, cpr_k2_beta1,
                  Setup{ObjectiveKind::kCpr, 2, 0.0, 1.0, OptimizerKind::kAdagrad})
    ->Unit(benchmark::kMillisecond)
    ->MinTime(2.0);
BENCHMARK_CAPTURE(BM_Train, cpr_k2_beta3,
                  Setup{ObjectiveKind::kCpr, 2, 0.0, 3.0, OptimizerKind::kAdagrad})
    ->Unit(benchmark::kMillisecond)
    ->MinTime(2.0);
BENCHMARK_CAPTURE(BM_Train, cpr_k3_beta1,
                  Setup{ObjectiveKind::kCpr, 3, 0.0, 1.0, OptimizerKind::kAdagrad})
    ->Unit(benchmark::kMillisecond)
    ->MinTime(2.0);
BENCHMARK_CAPTURE(BM_Train, cpr_k2mix3_beta3,
                  Setup{ObjectiveKind::kCpr, 2, 0.3, 3.0, OptimizerKind::kAdagrad})
    ->Unit(benchmark::kMillisecond)
    ->MinTime(2.0);
BENCHMARK_CAPTURE(BM_Train, cpr_k2_beta1_sgd,
                  Setup{ObjectiveKind::kCpr, 2, 0.0, 1.0, OptimizerKind::kSgd})
    ->Unit(benchmark::kMillisecond)
    ->MinTime(2.0);
BENCHMARK_CAPTURE(BM_Train, bpr, Setup{ObjectiveKind::kBpr, 2, 0.0, 1.0, OptimizerKind::kAdagrad})
    ->Unit(benchmark::kMillisecond)
    ->MinTime(2.0);
BENCHMARK_CAPTURE(BM_Train, bpr_sgd, Setup{ObjectiveKind::kBpr, 2, 0.0, 1.0, OptimizerKind::kSgd})
    ->Unit(benchmark::kMillisecond)
    ->MinTime(2.0);
BENCHMARK_CAPTURE(BM_Train, bce_4neg,
                  Setup{ObjectiveKind::kBce, 2, 0.0, 1.0, OptimizerKind::kAdagrad})
    ->Unit(benchmark::kMillisecond)
    ->MinTime(2.0);

// CPR and BPR alternately, so that both see the same machine load.
void BM_CprVsBprCost(benchmark::State& state) {
  Embeddings cm, bm;
  auto cpr = MakeLoop(Setup{ObjectiveKind::kCpr, 2, 0.0, 1.0, OptimizerKind::kAdagrad}, &cm);
  auto bpr = MakeLoop(Setup{ObjectiveKind::kBpr, 2, 0.0, 1.0, OptimizerKind::kAdagrad}, &bm);
  double cpr_s = 0, bpr_s = 0;
  uint64_t cpr_pos = 0, bpr_pos = 0;
  for (auto _ : state) {
    for (FitLoop* loop : {cpr.get(), bpr.get()}) {
      FitProgress p;
      if (!loop->RunBatches(20,
                            [&](const FitProgress& x) {
                              p = x;
                              return true;
                            })
               .ok()) {
        state.SkipWithError("training failed");
        return;
      }
      (loop == cpr.get() ? cpr_s : bpr_s) += p.seconds;
      (loop == cpr.get() ? cpr_pos : bpr_pos) += p.positives;
    }
  }
  const double cpr_cost = cpr_s / static_cast<double>(cpr_pos);
  const double bpr_cost = bpr_s / static_cast<double>(bpr_pos);
  state.counters["cpr_ns_per_positive"] = cpr_cost * 1e9;
  state.counters["bpr_ns_per_positive"] = bpr_cost * 1e9;
  state.counters["cpr_over_bpr"] = cpr_cost / bpr_cost;
}
BENCHMARK(BM_CprVsBprCost)->Unit(benchmark::kMillisecond)->MinTime(3.0);

// Membership queries in the sampler's pattern: a random observed user, a random item.
void BM_Membership(benchmark::State& state, bool hash) {
  const World& w = SharedWorld();
  const Interactions& d = w.train;
  std::vector<std::unordered_set<uint32_t>> sets;
  if (hash) {
    sets.resize(d.num_users());
    for (const Pair& p : d.pairs()) sets[p.user].insert(p.item);
  }
  Rng rng(1);
  uint64_t hits = 0;
  for (auto _ : state) {
    for (int n = 0; n < 1024; ++n) {
      const uint32_t u = d.pair(rng.Uniform(d.size())).user;
      const uint32_t i = static_cast<uint32_t>(rng.Uniform(d.num_items()));
      hits += hash ? sets[u].count(i) : d.Contains(u, i);
    }
  }
  benchmark::DoNotOptimize(hits);
  state.SetItemsProcessed(state.iterations() * 1024);
}
BENCHMARK_CAPTURE(BM_Membership, sorted_vector, false);
BENCHMARK_CAPTURE(BM_Membership, unordered_set, true);

void BM_Synth1M(benchmark::State& state) {
  size_t events = 0;
  for (auto _ : state) {
    SynthOptions o;
    o.users = 50000;
    o.items = 20000;
    o.target_interactions = 1000000;
    o.seed = 5;
    SynthWorld w;
    if (!GenerateSynthWorld(o, &w).ok()) {
      state.SkipWithError("synth failed");
      break;
    }
    events = w.events.size();
  }
  state.counters["events"] = static_cast<double>(events);
}
BENCHMARK(BM_Synth1M)->Unit(benchmark::kSecond)->Iterations(1);

}  // namespace
}  // namespace plumb::trainer

BENCHMARK_MAIN();
