#include "trainer/online/gate.h"

#include <algorithm>
#include <cmath>

#include "core/scan.h"
#include "core/split.h"
#include "core/topk.h"
#include "trainer/online/training_state.h"

namespace plumb::online {
namespace {

constexpr uint64_t kGateSplitSeed = 20221;

}  // namespace

GateSample BuildGateSample(const TrainingState& state, size_t max_users) {
  GateSample sample;
  const auto& val = state.validation();
  if (val.empty()) return sample;
  const trainer::Interactions& train = state.train();
  std::vector<uint64_t> degrees(train.num_items(), 0);
  for (uint32_t i = 0; i < degrees.size(); ++i) degrees[i] = train.item_degree(i);
  std::vector<Interaction> held;
  held.reserve(val.size());
  for (const trainer::Pair& p : val) {
    if (p.item < degrees.size()) held.push_back({p.user, p.item});
  }
  SplitOptions opt;
  opt.gamma = 1.0;
  opt.validation_fraction = 1.0;
  opt.seed = kGateSplitSeed;
  DebiasedSplit split;
  if (!debiased_split(held, degrees, opt, &split).ok()) return sample;
  std::vector<Interaction>& kept = split.validation;
  std::sort(kept.begin(), kept.end(), [](const Interaction& a, const Interaction& b) {
    return a.user != b.user ? a.user < b.user : a.item < b.item;
  });
  std::vector<uint32_t> items;
  for (size_t n = 0; n < kept.size() && sample.users.size() < max_users;) {
    const uint32_t u = kept[n].user;
    items.clear();
    for (; n < kept.size() && kept[n].user == u; ++n) {
      if (items.empty() || items.back() != kept[n].item) items.push_back(kept[n].item);
    }
    // A user with no training pairs has an untrained row: left out, as is common practice.
    if (train.user_degree(u) == 0) continue;
    sample.users.push_back(u);
    sample.relevant.Append(items);
  }
  return sample;
}

double GateRecall(const GateSample& sample, const trainer::Embeddings& model,
                  const trainer::Interactions& train, uint32_t k) {
  if (sample.users.empty()) return std::nan("");
  TopKSelector selector(k);
  std::vector<float> scratch(kDefaultScanBlockRows);
  std::vector<uint32_t> ranked;
  double total = 0.0;
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
    total += recall_at_k(ranked, sample.relevant[n], k);
  }
  return total / static_cast<double>(sample.users.size());
}

GateVerdict JudgeCandidate(const trainer::Embeddings& candidate,
                           const trainer::Embeddings* active, const GateSample& sample,
                           const trainer::Interactions& train, const GateOptions& options) {
  GateVerdict v;
  v.candidate_recall = std::nan("");
  v.active_recall = std::nan("");
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
  if (sample.users.size() < options.min_users) {
    v.outcome = store::GateOutcome::kSkipped;
    v.reason = "validation sample has " + std::to_string(sample.users.size()) +
               " users, fewer than " + std::to_string(options.min_users) + ": not compared";
    return v;
  }
  v.candidate_recall = GateRecall(sample, candidate, train, options.k);
  if (active) v.active_recall = GateRecall(sample, *active, train, options.k);
  if (std::isnan(v.candidate_recall)) {
    v.outcome = store::GateOutcome::kSkipped;
    v.reason = "no validation data yet";
  } else if (!active) {
    v.outcome = store::GateOutcome::kSkipped;
    v.reason = "no active version to compare with";
  } else if (v.candidate_recall < v.active_recall - options.tolerance) {
    v.outcome = store::GateOutcome::kFailed;
    v.reason = "validation recall@" + std::to_string(options.k) + " " +
               std::to_string(v.candidate_recall) + " is below the active version's " +
               std::to_string(v.active_recall) + " by more than " +
               std::to_string(options.tolerance);
  } else {
    v.outcome = store::GateOutcome::kPassed;
  }
  return v;
}

}  // namespace plumb::online
