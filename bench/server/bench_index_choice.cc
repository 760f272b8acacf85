// bench_index_choice: why plumb-serve's approximate index is an hnswlib graph. The index
// libraries Debian offers — hnswlib (libhnswlib-dev, what plumb uses) and faiss
// (libfaiss-dev: its HNSW graph, an inverted file with float rows, and one with 8-bit
// scalar-quantised rows) — on one trained catalogue, measured in one run.
//
// Every index answers the same way plumb's Recommend does with its index: ask for
// count + (seen items) candidates by inner product, drop the seen ones, score the survivors
// exactly against the float rows and keep the top count (so only membership is approximate).
// Printed per index and setting: build time (same build threads for all), the index's size
// (hnswlib: graph + its copy of the rows; faiss: its serialised size, which is what it holds),
// the process's peak RSS at the end,
// one-thread latency percentiles of the whole call, recall@count
// against the exact answer, and each popularity group's share of the answers' slots beside
// exact's (the same measures as bench_catalogue).
//
// The graph indexes' search breadth is hnswlib's ef / faiss's efSearch (a search for k uses
// max(k, breadth), as in hnswlib); the inverted files' knob is how many lists a query probes
// (nprobe). Lists: --lists (default 4 · sqrt(n), rounded to a power of two: common practice,
// from memory), trained by faiss's k-means on its default sample (256 rows per list).
#include <faiss/IndexFlat.h>
#include <faiss/IndexHNSW.h>
#include <faiss/IndexIVFFlat.h>
#include <faiss/IndexScalarQuantizer.h>
#include <faiss/impl/io.h>
#include <faiss/index_io.h>
#include <omp.h>

#include <CLI/CLI.hpp>
#include <algorithm>
#include <chrono>
#include <cmath>
#include <cstdio>
#include <functional>
#include <memory>
#include <random>
#include <set>
#include <string>
#include <vector>

#include "bench/server/catalogue_world.h"
#include "core/approx_index.h"
#include "core/metrics.h"
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
  uint32_t links = 16;
  uint32_t build_breadth = 100;
  uint32_t build_threads = 2;
  uint32_t lists = 0;  // 0: 4 · sqrt(n) rounded to a power of two
  bool spherical = true;
  std::vector<uint32_t> breadths = {64, 128, 256};
  std::vector<uint32_t> probes = {16, 64, 256, 1024};
  std::vector<std::string> indexes = {"hnswlib", "faiss-hnsw", "faiss-ivf", "faiss-ivf-sq8"};
};

constexpr size_t kGroups = 5;

using FaissId = faiss::Index::idx_t;

// What every path is measured by.
struct Outcome {
  tools::LatencySummary latency;
  double recall = 1;
  std::vector<double> shares;
};

// The fixed part of the run: the catalogue, the queries, the exact answers and the groups.
struct Bench {
  explicit Bench(const Args& args) : a(args) {}

  const Args& a;
  std::shared_ptr<const Snapshot> snap;
  std::vector<uint32_t> users;
  std::vector<std::vector<uint32_t>> exact;  // exact top count per query, by index
  std::vector<uint32_t> group_of;
  Outcome exact_outcome;

  // Candidates for one query: appends item indexes to *out (any order, duplicates allowed).
  using CandidateFn =
      std::function<void(std::span<const float> query, uint32_t want, std::vector<uint32_t>* out)>;

  // Runs every query through `candidates`, then plumb's exclusion and exact re-scoring.
  Outcome Measure(const CandidateFn& candidates) const {
    Outcome o;
    o.shares.assign(kGroups, 0.0);
    tools::LatencyRecord rec;
    std::vector<uint32_t> cand;
    std::vector<std::pair<float, uint32_t>> scored;
    size_t slots = 0, hits = 0;
    const MatrixView items = snap->items();
    for (uint32_t q = 0; q < a.queries; ++q) {
      const uint32_t u = users[q];
      const std::span<const float> query = snap->user_vector(u);
      const std::span<const uint32_t> seen = snap->seen_items(u);
      const Clock::time_point c0 = Clock::now();
      cand.clear();
      candidates(query, a.count + static_cast<uint32_t>(seen.size()), &cand);
      std::sort(cand.begin(), cand.end());
      cand.erase(std::unique(cand.begin(), cand.end()), cand.end());
      scored.clear();
      for (uint32_t i : cand) {
        if (std::binary_search(seen.begin(), seen.end(), i)) continue;
        const std::span<const float> row = items.row(i);
        float dot = 0;
        for (size_t d = 0; d < row.size(); ++d) dot += query[d] * row[d];
        scored.emplace_back(-dot, i);
      }
      const size_t keep = std::min<size_t>(a.count, scored.size());
      std::partial_sort(scored.begin(), scored.begin() + keep, scored.end());
      rec.Add(std::chrono::duration_cast<std::chrono::nanoseconds>(Clock::now() - c0).count());
      for (size_t r = 0; r < keep; ++r) {
        const uint32_t i = scored[r].second;
        o.shares[group_of[i]] += 1;
        hits += std::count(exact[q].begin(), exact[q].end(), i);
      }
      slots += keep;
    }
    for (double& v : o.shares) v /= std::max<size_t>(1, slots);
    o.latency = rec.Summarize();
    o.recall = static_cast<double>(hits) / (static_cast<double>(a.queries) * a.count);
    return o;
  }

  void PrintRow(const std::string& index, const std::string& setting, double build_s,
                double size_mb, const Outcome& o) const {
    std::printf("%-14s %-12s %8.1f %8.0f %8s %8s %8s %7.4f", index.c_str(), setting.c_str(),
                build_s, size_mb, Milliseconds(o.latency.p50_ns).c_str(),
                Milliseconds(o.latency.p90_ns).c_str(), Milliseconds(o.latency.p99_ns).c_str(),
                o.recall);
    for (double share : o.shares) std::printf(" %6.4f", share);
    std::printf(" %7.1f%%\n", 100 * WorstGroupChange(o.shares, exact_outcome.shares));
    std::fflush(stdout);
  }
};

size_t SerializedBytes(const faiss::Index& index) {
  faiss::VectorIOWriter writer;
  faiss::write_index(&index, &writer);
  return writer.data.size();
}

// faiss labels as candidates; -1 marks an empty slot.
void AppendLabels(const std::vector<FaissId>& labels, std::vector<uint32_t>* out) {
  for (FaissId l : labels) {
    if (l >= 0) out->push_back(static_cast<uint32_t>(l));
  }
}

void RunHnswlib(const Bench& b) {
  ApproxIndexOptions o;
  o.links = b.a.links;
  o.build_breadth = b.a.build_breadth;
  o.build_threads = b.a.build_threads;
  std::unique_ptr<const ApproxIndex> index;
  const Clock::time_point t0 = Clock::now();
  Status s = ApproxIndex::Build(b.snap->items(), ApproxIndex::Metric::kDot, o, &index);
  const double build_s = SecondsSince(t0);
  if (!s.ok()) {
    std::fprintf(stderr, "hnswlib: %s\n", s.ToString().c_str());
    return;
  }
  std::vector<float> scratch;
  for (uint32_t breadth : b.a.breadths) {
    const Outcome o2 = b.Measure([&](std::span<const float> q, uint32_t want, auto* out) {
      index->Search(q, want, breadth, &scratch, out);
    });
    b.PrintRow("hnswlib", "ef " + std::to_string(breadth), build_s, index->memory_bytes() / 1e6,
               o2);
  }
}

void RunFaissHnsw(const Bench& b) {
  const MatrixView items = b.snap->items();
  auto index = std::make_unique<faiss::IndexHNSWFlat>(
      static_cast<int>(items.dim), static_cast<int>(b.a.links), faiss::METRIC_INNER_PRODUCT);
  index->hnsw.efConstruction = static_cast<int>(b.a.build_breadth);
  omp_set_num_threads(static_cast<int>(b.a.build_threads));
  const Clock::time_point t0 = Clock::now();
  index->add(static_cast<FaissId>(items.rows), items.data);
  const double build_s = SecondsSince(t0);
  omp_set_num_threads(1);
  const double size = SerializedBytes(*index) / 1e6;
  std::vector<float> distances;
  std::vector<FaissId> labels;
  for (uint32_t breadth : b.a.breadths) {
    const Outcome o = b.Measure([&](std::span<const float> q, uint32_t want, auto* out) {
      index->hnsw.efSearch = static_cast<int>(std::max(want, breadth));
      distances.resize(want);
      labels.resize(want);
      index->search(1, q.data(), want, distances.data(), labels.data());
      AppendLabels(labels, out);
    });
    b.PrintRow("faiss-hnsw", "ef " + std::to_string(breadth), build_s, size, o);
  }
}

void RunFaissIvf(const Bench& b, bool sq8) {
  const MatrixView items = b.snap->items();
  const int dim = static_cast<int>(items.dim);
  uint32_t lists = b.a.lists;
  if (lists == 0) {
    lists = 1;
    while (lists * 2 <= 4 * std::sqrt(static_cast<double>(items.rows))) lists *= 2;
  }
  auto quantizer = std::make_unique<faiss::IndexFlatIP>(dim);
  std::unique_ptr<faiss::IndexIVF> index;
  if (sq8) {
    index = std::make_unique<faiss::IndexIVFScalarQuantizer>(
        quantizer.get(), dim, lists, faiss::ScalarQuantizer::QT_8bit, faiss::METRIC_INNER_PRODUCT);
  } else {
    index = std::make_unique<faiss::IndexIVFFlat>(quantizer.get(), dim, lists,
                                                  faiss::METRIC_INNER_PRODUCT);
  }
  omp_set_num_threads(static_cast<int>(b.a.build_threads));
  const Clock::time_point t0 = Clock::now();
  index->cp.spherical = b.a.spherical;
  index->train(static_cast<FaissId>(items.rows), items.data);
  const double train_s = SecondsSince(t0);
  index->add(static_cast<FaissId>(items.rows), items.data);
  const double build_s = SecondsSince(t0);
  omp_set_num_threads(1);
  const double size = SerializedBytes(*index) / 1e6;
  const std::string name = sq8 ? "faiss-ivf-sq8" : "faiss-ivf";
  std::printf("%-14s %u lists, k-means %.1f s of the build\n", name.c_str(), lists, train_s);
  std::vector<float> distances;
  std::vector<FaissId> labels;
  for (uint32_t probe : b.a.probes) {
    index->nprobe = probe;
    const Outcome o = b.Measure([&](std::span<const float> q, uint32_t want, auto* out) {
      distances.resize(want);
      labels.resize(want);
      index->search(1, q.data(), want, distances.data(), labels.data());
      AppendLabels(labels, out);
    });
    b.PrintRow(name, "nprobe " + std::to_string(probe), build_s, size, o);
  }
}

int Run(const Args& a) {
  SnapshotParts parts;
  Status s = FitCatalogueWorld(a.world, &parts);
  Bench b(a);
  if (s.ok()) s = Snapshot::Build(std::move(parts), &b.snap);  // no index: min_items 0
  if (s.ok()) s = popularity_groups(b.snap->item_degrees(), kGroups, &b.group_of);
  if (!s.ok()) {
    std::fprintf(stderr, "bench_index_choice: %s\n", s.ToString().c_str());
    return 1;
  }
  std::mt19937_64 rng(a.world.seed + 3);
  b.users.resize(a.queries);
  for (uint32_t& u : b.users) u = static_cast<uint32_t>(rng() % b.snap->num_users());

  // The reference: plumb's exact pruned scan, through the Scorer as plumb-serve calls it.
  {
    const Scorer exact_scorer({}, ApproxQueryOptions{.use_index = false});
    b.exact.resize(a.queries);
    b.exact_outcome.shares.assign(kGroups, 0.0);
    tools::LatencyRecord rec;
    size_t slots = 0;
    for (uint32_t q = 0; q < a.queries; ++q) {
      RecommendQuery rq;
      rq.user_id = b.snap->user_id(b.users[q]);
      rq.count = a.count;
      RankedList r;
      const Clock::time_point c0 = Clock::now();
      s = exact_scorer.Recommend(*b.snap, rq, &r);
      rec.Add(std::chrono::duration_cast<std::chrono::nanoseconds>(Clock::now() - c0).count());
      if (!s.ok()) {
        std::fprintf(stderr, "bench_index_choice: exact: %s\n", s.ToString().c_str());
        return 1;
      }
      for (const ScoredIndex& x : r.items) {
        b.exact[q].push_back(x.index);
        b.exact_outcome.shares[b.group_of[x.index]] += 1;
      }
      slots += r.items.size();
    }
    for (double& v : b.exact_outcome.shares) v /= std::max<size_t>(1, slots);
    b.exact_outcome.latency = rec.Summarize();
  }
  std::printf(
      "\n%u items x %u, Recommend top %u with seen items excluded, %u calls per row, one "
      "thread; builds on %u threads (graph links %u, build breadth %u)\n",
      b.snap->num_items(), b.snap->dim(), a.count, a.queries, a.build_threads, a.links,
      a.build_breadth);
  std::printf("%-14s %-12s %8s %8s %8s %8s %8s %7s", "index", "setting", "build s", "size MB",
              "p50 ms", "p90 ms", "p99 ms", "recall");
  for (size_t g = 0; g < kGroups; ++g) std::printf(" share%zu", g + 1);
  std::printf(" worst>=2%%\n");
  b.PrintRow("exact", "pruned scan", 0, 0, b.exact_outcome);
  for (const std::string& name : a.indexes) {
    if (name == "hnswlib") RunHnswlib(b);
    if (name == "faiss-hnsw") RunFaissHnsw(b);
    if (name == "faiss-ivf") RunFaissIvf(b, false);
    if (name == "faiss-ivf-sq8") RunFaissIvf(b, true);
  }
  const auto [rss, peak] = ProcessRssMb();
  std::printf("process RSS at the end %.0f MB, peak %.0f MB\n", rss, peak);
  return 0;
}

}  // namespace
}  // namespace plumb::server

int main(int argc, char** argv) {
  plumb::server::Args a;
  CLI::App app{
      "bench_index_choice: hnswlib (what plumb-serve uses) beside faiss's HNSW and inverted "
      "file indexes on one CPR-fitted synthetic catalogue: build time, size, latency, recall "
      "and popularity-group shares against the exact scan"};
  plumb::server::AddCatalogueWorldOptions(&app, &a.world);
  app.add_option("--queries", a.queries, "calls per row")->capture_default_str();
  app.add_option("--count", a.count, "answers per call (top N)")->capture_default_str();
  app.add_option("--links", a.links, "graph links per node (both graph libraries)")
      ->capture_default_str();
  app.add_option("--build-breadth", a.build_breadth, "graph candidate list while inserting")
      ->capture_default_str();
  app.add_option("--build-threads", a.build_threads, "threads building each index")
      ->capture_default_str();
  app.add_option("--lists", a.lists, "inverted lists (0: 4 sqrt(n), a power of two)")
      ->capture_default_str();
  app.add_flag("!--plain-kmeans", a.spherical,
               "train the inverted lists with plain k-means (default: centroids normalised "
               "each iteration, faiss's spherical k-means, suited to inner product)");
  app.add_option("--breadths", a.breadths, "graph search breadths to sweep")
      ->delimiter(',')
      ->capture_default_str();
  app.add_option("--probes", a.probes, "inverted lists probed per call, to sweep")
      ->delimiter(',')
      ->capture_default_str();
  app.add_option("--indexes", a.indexes, "which to build, in order")
      ->delimiter(',')
      ->check(CLI::IsMember({"hnswlib", "faiss-hnsw", "faiss-ivf", "faiss-ivf-sq8"}))
      ->capture_default_str();
  CLI11_PARSE(app, argc, argv);
  return plumb::server::Run(a);
}
