// ApproxIndex: an approximate nearest-neighbour index over an item matrix, for catalogues too
// large for the exact pruned scan (core/scan.h) to answer in about a millisecond.
//
// A hierarchical navigable small-world graph (Debian's hnswlib; Malkov & Yashunin, "Efficient
// and robust approximate nearest neighbor search using Hierarchical Navigable Small World
// graphs", IEEE TPAMI 2018), searched by inner product (hnswlib's distance 1 - q·x):
//   kDot:    the rows as they are (Recommend's maximum inner product);
//   kCosine: the rows scaled to unit length, zero rows left zero (SimilarItems).
// Measured on a trained model (tests/server/approx_test.cc, 8,000 items, search breadth 128):
// searching the inner product directly recalls 0.995 of the exact top 20 with the popularity
// groups' shares within 1 %; the textbook reduction of inner product to Euclidean distance
// (one extra coordinate sqrt(R² - |x|²), Bachrach et al., RecSys 2014) recalled 0.39 at the
// same breadth (0.96 only at breadth 4,000): it puts the many short item vectors of a trained
// model close together, where the graph search cannot tell them apart.
// The index returns candidate item indexes only: callers re-score them exactly against the
// float matrix, so every score they report is exact and only membership is approximate.
#pragma once

#include <cstddef>
#include <cstdint>
#include <memory>
#include <span>
#include <vector>

#include "core/aligned.h"
#include "core/status.h"

namespace plumb {

struct ApproxIndexOptions {
  // Graph degree (hnswlib's M): links per node on the upper layers, twice that on the
  // bottom one. More links: higher recall, more memory, slower build.
  uint32_t links = 16;
  // Candidate list while inserting (ef_construction): more = a better graph, slower build.
  uint32_t build_breadth = 200;
  // Candidate list while searching (ef): the recall/latency knob. A search for k results
  // uses max(search_breadth, k).
  uint32_t search_breadth = 128;
  // Threads that insert items; each runs at a lower CPU priority (nice +10) so that a build
  // beside a serving process yields to requests.
  uint32_t build_threads = 1;
  uint64_t seed = 100;
};

class ApproxIndex {
 public:
  enum class Metric { kDot, kCosine };

  // Builds the index over every row of `items` (not kept: the index holds its own copy of
  // the transformed rows). InvalidArgument for an empty matrix, dim 0, a non-finite value
  // or zero links/breadths; ResourceExhausted when the graph cannot be allocated. Takes
  // seconds to minutes (about n · log n · build_breadth distance evaluations).
  static Status Build(MatrixView items, Metric metric, const ApproxIndexOptions& options,
                      std::unique_ptr<const ApproxIndex>* out);

  ~ApproxIndex();
  ApproxIndex(const ApproxIndex&) = delete;
  ApproxIndex& operator=(const ApproxIndex&) = delete;

  // Appends to *candidates the indexes of (about) the `want` rows closest to `query` under
  // the index's metric, in no particular order, searching with a candidate list of
  // max(want, breadth) (breadth 0: the options' search_breadth). `query` has the matrix's
  // dim. Thread-safe: any number of searches may run at once. Uses `scratch` (resized as
  // needed) for the transformed query.
  void Search(std::span<const float> query, uint32_t want, uint32_t breadth,
              std::vector<float>* scratch, std::vector<uint32_t>* candidates) const;

  Metric metric() const { return metric_; }
  size_t size() const { return rows_; }
  // Bytes of the graph and its copy of the rows.
  size_t memory_bytes() const;
  // Seconds the build took.
  double build_seconds() const { return build_seconds_; }
  // The options' search_breadth: what Search uses when the caller passes 0.
  uint32_t search_breadth() const { return search_breadth_; }

 private:
  struct Graph;
  ApproxIndex() = default;

  Metric metric_ = Metric::kDot;
  size_t rows_ = 0;
  size_t dim_ = 0;
  double build_seconds_ = 0;
  uint32_t search_breadth_ = 0;
  std::unique_ptr<Graph> graph_;
};

}  // namespace plumb
