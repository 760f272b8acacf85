// Offline evaluation of a model against held-out test pairs at cut-off K, with core's top-K
// scan and core's metrics (DESIGN.md section 2, "Debiased evaluation"): each test user's
// top-K list excludes the user's training items; the report has Recall@K, NDCG@K, ARP@K,
// exposure Gini, coverage and popularity-group shares beside the test set's.
#pragma once

#include <cstdint>
#include <functional>
#include <span>

#include "core/metrics.h"
#include "core/status.h"
#include "trainer/embeddings.h"
#include "trainer/interactions.h"

namespace plumb::trainer {

struct EvalOptions {
  uint32_t k = 20;
  // Popularity groups (by training degree, about equal degree sums).
  uint32_t num_groups = 5;
  uint32_t threads = 1;
};

// Fills scores (one per item, size num_items) for one user. Called concurrently from
// several threads with distinct buffers, so it must be thread-safe.
using UserScorer = std::function<void(uint32_t user, std::span<float> scores)>;

// Evaluates the ranking that `model` gives. Test users are those with at least one test
// pair; test pairs that are training pairs are ignored (they can never be recommended).
// Popularity is the item degree in `train`. Thread-safe for concurrent calls on
// unchanging inputs; uses options.threads worker threads.
// Errors: InvalidArgument if k or num_groups or threads is 0, a test user or item is outside
// the model, or the model has fewer items than train declares.
Status EvaluateModel(const Embeddings& model, const Interactions& train, std::span<const Pair> test,
                     const EvalOptions& options, RankingReport* out);

// As EvaluateModel for any scorer over num_items items (e.g. the synthetic world's true
// relevance, the reference ranking beside which group shares are read).
Status EvaluateScorer(const UserScorer& scorer, uint32_t num_items, const Interactions& train,
                      std::span<const Pair> test, const EvalOptions& options, RankingReport* out);

}  // namespace plumb::trainer
