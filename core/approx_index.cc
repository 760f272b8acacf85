#include "core/approx_index.h"

#include <hnswlib/hnswlib.h>

#include <algorithm>
#include <atomic>
#include <chrono>
#include <cmath>
#include <new>
#include <stdexcept>
#include <string>
#include <thread>

#include "core/thread_priority.h"

namespace plumb {

struct ApproxIndex::Graph {
  explicit Graph(size_t dim) : space(dim) {}
  hnswlib::InnerProductSpace space;  // distance 1 - q·x
  std::unique_ptr<hnswlib::HierarchicalNSW<float>> hnsw;
};

namespace {

// The row as the graph stores it: as it is for kDot, scaled to unit length for kCosine.
void TransformRow(std::span<const float> row, ApproxIndex::Metric metric, float* out) {
  if (metric == ApproxIndex::Metric::kDot) {
    std::copy(row.begin(), row.end(), out);
  } else {
    double norm_sq = 0;
    for (float v : row) norm_sq += static_cast<double>(v) * v;
    const double scale = norm_sq > 0 ? 1.0 / std::sqrt(norm_sq) : 0.0;
    for (size_t d = 0; d < row.size(); ++d) out[d] = static_cast<float>(row[d] * scale);
  }
}

}  // namespace

ApproxIndex::~ApproxIndex() = default;

Status ApproxIndex::Build(MatrixView items, Metric metric, const ApproxIndexOptions& options,
                          std::unique_ptr<const ApproxIndex>* out) {
  if (items.rows == 0 || items.dim == 0) {
    return Status::InvalidArgument("an approximate index needs a non-empty item matrix");
  }
  if (items.rows > (size_t{1} << 31)) {
    return Status::InvalidArgument("an approximate index holds at most 2^31 items");
  }
  if (options.links < 2 || options.build_breadth == 0 || options.search_breadth == 0) {
    return Status::InvalidArgument(
        "approximate index: links must be at least 2 and the breadths positive");
  }
  const auto begin = std::chrono::steady_clock::now();
  for (size_t r = 0; r < items.rows; ++r) {
    for (float v : items.row(r)) {
      if (!std::isfinite(v)) {
        return Status::InvalidArgument("approximate index: item row " + std::to_string(r) +
                                       " has a non-finite value");
      }
    }
  }

  std::unique_ptr<ApproxIndex> index(new ApproxIndex());
  index->metric_ = metric;
  index->rows_ = items.rows;
  index->dim_ = items.dim;
  const size_t stored_dim = items.dim;
  try {
    index->graph_ = std::make_unique<Graph>(items.dim);
    index->graph_->hnsw = std::make_unique<hnswlib::HierarchicalNSW<float>>(
        &index->graph_->space, items.rows, options.links, options.build_breadth, options.seed);
  } catch (const std::bad_alloc&) {
    return Status::ResourceExhausted("approximate index: cannot allocate the graph for " +
                                     std::to_string(items.rows) + " items");
  } catch (const std::runtime_error& e) {
    return Status::ResourceExhausted(std::string("approximate index: ") + e.what());
  }
  hnswlib::HierarchicalNSW<float>& hnsw = *index->graph_->hnsw;

  // Items are inserted in index order by several threads at once (hnswlib's addPoint is
  // thread-safe for distinct labels); the first one alone, so that the graph has an entry.
  std::atomic<size_t> next{0};
  std::atomic<bool> failed{false};
  auto insert = [&](bool lower_priority) {
    if (lower_priority) LowerThisThreadsPriority(10);
    std::vector<float> row(stored_dim);
    for (;;) {
      const size_t r = next.fetch_add(1);
      if (r >= items.rows || failed.load()) return;
      TransformRow(items.row(r), metric, row.data());
      try {
        hnsw.addPoint(row.data(), r);
      } catch (const std::exception&) {
        failed = true;
        return;
      }
    }
  };
  {
    std::vector<float> first(stored_dim);
    TransformRow(items.row(0), metric, first.data());
    hnsw.addPoint(first.data(), 0);
    next = 1;
  }
  const uint32_t threads = std::max(1u, options.build_threads);
  std::vector<std::thread> workers;
  for (uint32_t t = 1; t < threads; ++t) workers.emplace_back(insert, true);
  insert(/*lower_priority=*/false);  // the caller's own thread keeps its priority
  for (std::thread& w : workers) w.join();
  if (failed) return Status::ResourceExhausted("approximate index: inserting an item failed");
  // The search breadth is passed per call (Search asks hnswlib for max(want, breadth)
  // results, which searches with ef = that number); the index's own ef stays minimal.
  hnsw.setEf(1);
  index->search_breadth_ = options.search_breadth;
  index->build_seconds_ =
      std::chrono::duration<double>(std::chrono::steady_clock::now() - begin).count();
  *out = std::move(index);
  return Status::Ok();
}

void ApproxIndex::Search(std::span<const float> query, uint32_t want, uint32_t breadth,
                         std::vector<float>* scratch, std::vector<uint32_t>* candidates) const {
  if (want == 0) return;
  if (breadth == 0) breadth = search_breadth_;
  scratch->resize(dim_);
  TransformRow(query, metric_, scratch->data());
  const size_t keep = std::min<size_t>(want, rows_);
  auto found = graph_->hnsw->searchKnn(scratch->data(), std::max<size_t>(keep, breadth));
  while (found.size() > keep) found.pop();  // the farthest are on top
  while (!found.empty()) {
    candidates->push_back(static_cast<uint32_t>(found.top().second));
    found.pop();
  }
}

size_t ApproxIndex::memory_bytes() const {
  const hnswlib::HierarchicalNSW<float>& h = *graph_->hnsw;
  size_t bytes = h.max_elements_ * h.size_data_per_element_ + h.max_elements_ * sizeof(void*);
  for (size_t i = 0; i < h.cur_element_count; ++i) {
    bytes += static_cast<size_t>(h.element_levels_[i]) * h.size_links_per_element_;
  }
  return bytes;
}

}  // namespace plumb
