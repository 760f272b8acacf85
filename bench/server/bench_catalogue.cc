// bench_catalogue: Recommend and SimilarItems on a large catalogue, the exact pruned scan
// against the approximate index, on trained embeddings.
//
// A synthetic world (members x tools, Zipf-skewed popularity) is fitted with CPR (plumb's
// default objective) so that the item vectors have a trained model's uneven norms; with
// --tile T the fitted catalogue is repeated T times with Gaussian noise (--tile-noise, relative
// to each row's length) to reach sizes whose fit would take hours here, and the report says
// so. One snapshot holds both structures; a Scorer that ignores the index is the reference.
//
// Printed per call kind: server-side latency (nearest-rank percentiles, as everywhere in
// plumb), rows the exact scan confirmed with float scores per call, and for each search
// breadth recall@K against exact and each popularity group's share of the answers' slots
// next to exact's. The floor printed beside the exact scan is one read of the int8 codes
// (what any exact scan must touch), measured in the same run.
#include <CLI/CLI.hpp>
#include <algorithm>
#include <chrono>
#include <cmath>
#include <cstdio>
#include <fstream>
#include <random>
#include <sstream>
#include <string>
#include <vector>

#include "bench/server/catalogue_world.h"
#include "core/metrics.h"
#include "core/scan.h"
#include "server/scorer.h"
#include "server/snapshot.h"
#include "tools/latency_record.h"

namespace plumb::server {
namespace {

using Clock = std::chrono::steady_clock;

struct Args {
  CatalogueWorldOptions world;
  uint32_t queries = 2000;
  uint32_t count = 20;
  std::vector<uint32_t> breadths = {32, 64, 128, 256};
  uint32_t links = 16;
  uint32_t build_breadth = 200;
  uint32_t build_threads = 2;
  bool similar = true;
};

struct Sweep {
  tools::LatencySummary latency;
  double recall = 0;
  double approximate_share = 0;
  std::vector<double> shares;
};

double Overlap(const RankedList& a, const RankedList& b) {
  size_t hit = 0;
  for (const ScoredIndex& x : a.items) {
    for (const ScoredIndex& y : b.items) hit += x.index == y.index;
  }
  return b.items.empty() ? 1.0 : static_cast<double>(hit) / b.items.size();
}

void PrintRow(const std::string& label, const Sweep& s, const Sweep& exact) {
  std::printf("%-22s %8s %8s %8s %7.4f %6.3f ", label.c_str(),
              Milliseconds(s.latency.p50_ns).c_str(), Milliseconds(s.latency.p90_ns).c_str(),
              Milliseconds(s.latency.p99_ns).c_str(), s.recall, s.approximate_share);
  // The worst group's change, and the tail group's ratio on its own, whatever its size.
  for (double share : s.shares) std::printf(" %6.4f", share);
  std::printf("  %6.1f%% %6.3f\n", 100 * WorstGroupChange(s.shares, exact.shares),
              exact.shares[0] > 0 ? s.shares[0] / exact.shares[0] : 1.0);
}

void PrintHeader(const char* what, size_t groups) {
  std::printf("\n%s\n%-22s %8s %8s %8s %7s %6s ", what, "path", "p50 ms", "p90 ms", "p99 ms",
              "recall", "index");
  for (size_t g = 0; g < groups; ++g) std::printf(" share%zu", g + 1);
  std::printf("  worst>=2%%  tail/exact\n");
}

int Run(const Args& a) {
  SnapshotParts parts;
  Status s = FitCatalogueWorld(a.world, &parts);
  if (!s.ok()) {
    std::fprintf(stderr, "bench_catalogue: %s\n", s.ToString().c_str());
    return 1;
  }
  parts.approx.min_items = 1;
  parts.approx.index.links = a.links;
  parts.approx.index.build_breadth = a.build_breadth;
  parts.approx.index.build_threads = a.build_threads;
  parts.approx.similar_items = a.similar;
  const auto [rss_before, hwm_before] = ProcessRssMb();
  Clock::time_point t0 = Clock::now();
  std::shared_ptr<const Snapshot> snap;
  s = Snapshot::Build(std::move(parts), &snap);
  if (!s.ok()) {
    std::fprintf(stderr, "bench_catalogue: %s\n", s.ToString().c_str());
    return 1;
  }
  const double build_total = SecondsSince(t0);
  const auto [rss_after, hwm_after] = ProcessRssMb();
  const uint32_t items = snap->num_items(), dim = snap->dim();
  std::printf(
      "\nsnapshot of %u items x %u: built in %.1f s, of which the two approximate "
      "indexes %.1f s (%u build threads, links %u, build breadth %u)\n",
      items, dim, build_total, snap->approx_build_seconds(), a.build_threads, a.links,
      a.build_breadth);
  std::printf(
      "memory: float rows %.0f MB, index (dot) %.0f MB, index (cosine) %.0f MB; "
      "process RSS %.0f -> %.0f MB, peak %.0f MB\n",
      items * dim * 4.0 / 1e6, snap->dot_index()->memory_bytes() / 1e6,
      snap->cosine_index() ? snap->cosine_index()->memory_bytes() / 1e6 : 0.0, rss_before,
      rss_after, hwm_after);
  std::vector<uint32_t> group_of;
  constexpr size_t kGroups = 5;
  if (!popularity_groups(snap->item_degrees(), kGroups, &group_of).ok()) return 1;

  // The floor: streaming as many bytes as the int8 copy of the items holds (the least any
  // exact scan of this catalogue reads), from a buffer of that size, measured now.
  {
    std::vector<int64_t> buffer(snap->item_codes().bytes() / sizeof(int64_t), 1);
    tools::LatencyRecord floor;
    int64_t keep = 0;
    for (int r = 0; r < 50; ++r) {
      const Clock::time_point c0 = Clock::now();
      int64_t acc = 0;
      for (int64_t v : buffer) acc += v;
      keep += acc;
      floor.Add(std::chrono::duration_cast<std::chrono::nanoseconds>(Clock::now() - c0).count());
    }
    std::printf("floor: reading %.0f MB (the int8 copy's size) p50 %s ms (checksum %lld)\n",
                buffer.size() * 8 / 1e6, Milliseconds(floor.Percentile(50)).c_str(),
                static_cast<long long>(keep % 7));
  }

  std::mt19937_64 rng(a.world.seed + 3);
  std::vector<uint32_t> users(a.queries), uniform_items(a.queries), viewed_items(a.queries);
  for (uint32_t& u : users) u = static_cast<uint32_t>(rng() % snap->num_users());
  for (uint32_t& i : uniform_items) i = static_cast<uint32_t>(rng() % items);
  {
    // Items drawn in proportion to their interactions: the pages people look at, where a
    // "similar items" box is asked for.
    std::discrete_distribution<uint32_t> by_degree(snap->item_degrees().begin(),
                                                   snap->item_degrees().end());
    for (uint32_t& i : viewed_items) i = by_degree(rng);
  }

  // kind 0: Recommend; 1: SimilarItems of uniformly drawn items; 2: of interaction-drawn ones.
  for (int kind = 0; kind < (a.similar ? 3 : 1); ++kind) {
    const std::vector<uint32_t>& probe_items = kind == 1 ? uniform_items : viewed_items;
    auto run = [&](const Scorer& scorer, std::vector<RankedList>* answers, const Sweep* exact,
                   Sweep* out) {
      out->shares.assign(kGroups, 0.0);
      tools::LatencyRecord rec;
      size_t slots = 0, by_index = 0;
      answers->resize(a.queries);
      for (uint32_t q = 0; q < a.queries; ++q) {
        RankedList& r = (*answers)[q];
        const std::string id(kind == 0 ? snap->user_id(users[q]) : snap->item_id(probe_items[q]));
        const Clock::time_point c0 = Clock::now();
        Status st;
        if (kind == 0) {
          RecommendQuery rq;
          rq.user_id = id;
          rq.count = a.count;
          st = scorer.Recommend(*snap, rq, &r);
        } else {
          SimilarQuery sq;
          sq.item_id = id;
          sq.count = a.count;
          st = scorer.SimilarItems(*snap, sq, &r);
        }
        rec.Add(std::chrono::duration_cast<std::chrono::nanoseconds>(Clock::now() - c0).count());
        if (!st.ok()) {
          r.items.clear();
          continue;
        }
        by_index += r.approximate;
        for (const ScoredIndex& x : r.items) out->shares[group_of[x.index]] += 1;
        slots += r.items.size();
      }
      for (double& v : out->shares) v /= std::max<size_t>(1, slots);
      out->latency = rec.Summarize();
      out->approximate_share = static_cast<double>(by_index) / a.queries;
      (void)exact;
    };
    std::vector<RankedList> exact_answers, answers;
    Sweep exact;
    run(Scorer({}, ApproxQueryOptions{.use_index = false}), &exact_answers, nullptr, &exact);
    exact.recall = 1.0;
    PrintHeader(kind == 0   ? "Recommend (top 20, seen items excluded), server-side, 1 thread"
                : kind == 1 ? "SimilarItems (top 20 by cosine) of items drawn uniformly, "
                              "server-side, 1 thread"
                            : "SimilarItems (top 20 by cosine) of items drawn by their "
                              "interactions, server-side, 1 thread",
                kGroups);
    PrintRow("exact pruned scan", exact, exact);
    if (kind == 0) {
      // Rows the pruned scan had to confirm with float scores, per call.
      std::vector<float> block(kDefaultScanBlockRows);
      TopKSelector sel(a.count);
      double confirmed = 0;
      const uint32_t n = std::min<uint32_t>(a.queries, 200);
      for (uint32_t q = 0; q < n; ++q) {
        sel.Reset(a.count);
        ScanOutcome outcome;
        const auto seen = snap->seen_items(users[q]);
        if (top_k_by_dot_pruned(snap->items(), snap->item_codes(), snap->user_vector(users[q]),
                                Exclusions{{}, seen}, block, &sel, &outcome)
                .ok()) {
          confirmed += outcome.rows_scored_exactly;
        }
      }
      std::printf("%-22s rows confirmed with float scores per call: %.0f of %u (%.2f %%)\n", "",
                  confirmed / n, items, 100.0 * confirmed / n / items);
    }
    for (uint32_t breadth : a.breadths) {
      Sweep approx;
      run(Scorer({}, ApproxQueryOptions{.use_index = true, .search_breadth = breadth}), &answers,
          &exact, &approx);
      double recall = 0;
      for (uint32_t q = 0; q < a.queries; ++q) recall += Overlap(answers[q], exact_answers[q]);
      approx.recall = recall / a.queries;
      PrintRow("index, breadth " + std::to_string(breadth), approx, exact);
    }
  }
  return 0;
}

}  // namespace
}  // namespace plumb::server

int main(int argc, char** argv) {
  plumb::server::Args a;
  CLI::App app{
      "bench_catalogue: Recommend and SimilarItems at 1M-10M items, the exact pruned "
      "scan against the approximate index, on a CPR-fitted synthetic world"};
  AddCatalogueWorldOptions(&app, &a.world);
  app.add_option("--queries", a.queries, "calls per path")->capture_default_str();
  app.add_option("--breadths", a.breadths, "search breadths to sweep")
      ->delimiter(',')
      ->capture_default_str();
  app.add_option("--links", a.links, "graph links per node")->capture_default_str();
  app.add_option("--build-breadth", a.build_breadth, "candidate list while inserting")
      ->capture_default_str();
  app.add_option("--build-threads", a.build_threads, "threads building each index")
      ->capture_default_str();
  app.add_flag("!--no-similar", a.similar, "skip SimilarItems");
  CLI11_PARSE(app, argc, argv);
  return plumb::server::Run(a);
}
