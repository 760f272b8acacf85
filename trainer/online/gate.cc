#include "trainer/online/gate.h"

#include <algorithm>
#include <cmath>
#include <cstdio>

#include "core/scan.h"
#include "core/topk.h"
#include "trainer/online/training_state.h"

namespace plumb::online {
namespace {

// Orders users for the max_users cut: splitmix64 of the index, a fixed permutation.
uint64_t UserOrderKey(uint32_t user) {
  uint64_t z = user + 0x9E3779B97F4A7C15ULL;
  z = (z ^ (z >> 30)) * 0xBF58476D1CE4E5B9ULL;
  z = (z ^ (z >> 27)) * 0x94D049BB133111EBULL;
  return z ^ (z >> 31);
}

}  // namespace

GateSample BuildGateSample(const TrainingState& state, size_t max_users) {
  GateSample sample;
  const trainer::Interactions& train = state.train();
  std::vector<trainer::Pair> held;
  held.reserve(state.validation().size());
  for (const trainer::Pair& p : state.validation()) {
    // A user with no training pairs has an untrained row: left out, as is common practice.
    if (p.item < train.num_items() && train.user_degree(p.user) > 0) held.push_back(p);
  }
  std::sort(held.begin(), held.end(), [](const trainer::Pair& a, const trainer::Pair& b) {
    const uint64_t ka = UserOrderKey(a.user), kb = UserOrderKey(b.user);
    if (ka != kb) return ka < kb;
    return a.user != b.user ? a.user < b.user : a.item < b.item;
  });
  std::vector<uint32_t> items;
  double sum = 0.0, sum_sq = 0.0;
  for (size_t n = 0; n < held.size() && sample.users.size() < max_users;) {
    const uint32_t u = held[n].user;
    items.clear();
    for (; n < held.size() && held[n].user == u; ++n) {
      if (items.empty() || items.back() != held[n].item) items.push_back(held[n].item);
    }
    sample.users.push_back(u);
    sample.relevant.Append(items);
    for (uint32_t i : items) {
      const double w = 1.0 / std::max<uint32_t>(1, train.item_degree(i));
      sample.weights.push_back(w);
      sum += w;
      sum_sq += w * w;
    }
  }
  sample.effective_pairs = sum_sq > 0.0 ? sum * sum / sum_sq : 0.0;
  return sample;
}

std::vector<uint8_t> GateHits(const GateSample& sample, const trainer::Embeddings& model,
                              const trainer::Interactions& train, uint32_t k) {
  std::vector<uint8_t> hits;
  hits.reserve(sample.weights.size());
  TopKSelector selector(k);
  std::vector<float> scratch(kDefaultScanBlockRows);
  std::vector<uint32_t> ranked;
  const MatrixView items = model.item_view();
  for (size_t n = 0; n < sample.users.size(); ++n) {
    const uint32_t u = sample.users[n];
    ranked.clear();
    if (u < model.num_users()) {
      selector.Reset(k);
      Exclusions ex;
      ex.sorted_rows = train.items_of(u);
      ScanOutcome outcome;
      std::span<const float> query(model.user_row(u), model.dim());
      if (top_k_by_dot(items, query, ex, scratch, &selector, &outcome).ok()) {
        for (const ScoredIndex& s : selector.SortedResult()) ranked.push_back(s.index);
      }
    }
    std::sort(ranked.begin(), ranked.end());
    for (uint32_t i : sample.relevant[n]) {
      hits.push_back(std::binary_search(ranked.begin(), ranked.end(), i) ? 1 : 0);
    }
  }
  return hits;
}

double GateRecall(const GateSample& sample, std::span<const uint8_t> hits) {
  double sum = 0.0, hit = 0.0;
  for (size_t p = 0; p < hits.size() && p < sample.weights.size(); ++p) {
    sum += sample.weights[p];
    hit += sample.weights[p] * hits[p];
  }
  return sum > 0.0 ? hit / sum : std::nan("");
}

GateVerdict JudgeCandidate(const trainer::Embeddings& candidate, const trainer::Embeddings* active,
                           const GateSample& sample, const trainer::Interactions& train,
                           const GateOptions& options) {
  GateVerdict v;
  v.candidate_recall = std::nan("");
  v.active_recall = std::nan("");
  v.standard_error = std::nan("");
  v.effective_pairs = sample.effective_pairs;
  if (!candidate.AllFinite()) {
    v.outcome = store::GateOutcome::kFailed;
    v.reason = "non-finite values in the embeddings";
    return v;
  }
  const float max_norm = candidate.MaxRowNorm();
  if (max_norm > options.max_row_norm) {
    v.outcome = store::GateOutcome::kFailed;
    v.reason = "a row norm of " + std::to_string(max_norm) + " exceeds the bound " +
               std::to_string(options.max_row_norm);
    return v;
  }
  if (sample.weights.empty()) {
    v.outcome = store::GateOutcome::kSkipped;
    v.reason = "no validation data yet";
    return v;
  }
  const std::vector<uint8_t> cand = GateHits(sample, candidate, train, options.k);
  v.candidate_recall = GateRecall(sample, cand);
  if (sample.effective_pairs < options.min_effective_pairs) {
    v.outcome = store::GateOutcome::kSkipped;
    v.reason = "validation sample has an effective size of " +
               std::to_string(static_cast<int>(sample.effective_pairs)) +
               " weighted pairs, fewer than " +
               std::to_string(static_cast<int>(options.min_effective_pairs)) + ": not compared";
    return v;
  }
  if (!active) {
    v.outcome = store::GateOutcome::kSkipped;
    v.reason = "no active version to compare with";
    return v;
  }
  const std::vector<uint8_t> act = GateHits(sample, *active, train, options.k);
  v.active_recall = GateRecall(sample, act);
  // Paired difference of weighted means; its variance from the weighted spread of the
  // per-pair differences over the effective sample size.
  double sum = 0.0, mean = 0.0;
  for (size_t p = 0; p < cand.size(); ++p) sum += sample.weights[p];
  for (size_t p = 0; p < cand.size(); ++p) {
    mean += sample.weights[p] * (static_cast<double>(cand[p]) - act[p]);
  }
  mean /= sum;
  double var = 0.0;
  for (size_t p = 0; p < cand.size(); ++p) {
    const double d = static_cast<double>(cand[p]) - act[p] - mean;
    var += sample.weights[p] * d * d;
  }
  var /= sum;
  v.standard_error = std::sqrt(var / sample.effective_pairs);
  const double drop = v.active_recall - v.candidate_recall;
  if (drop - 2.0 * v.standard_error > options.tolerance) {
    v.outcome = store::GateOutcome::kFailed;
    char buf[256];
    std::snprintf(buf, sizeof buf,
                  "validation recall@%u %.4f is below the active version's %.4f by more than "
                  "%.4f (plus two standard errors of %.4f)",
                  options.k, v.candidate_recall, v.active_recall, options.tolerance,
                  v.standard_error);
    v.reason = buf;
  } else {
    v.outcome = store::GateOutcome::kPassed;
  }
  return v;
}

}  // namespace plumb::online
