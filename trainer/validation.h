// Debiased validation: how well a model ranks held-out interactions once the exposure bias of
// the observed data is weighted out. Used by the publish gate (trainer/online/gate.h), by the
// tuner that chooses the debiasing strength (trainer/tuner.h) and by `plumb fit --holdout`.
//
// Every held-out pair (u, i) counts, weighted by w_i = 1 / pop(i)^gamma (pop = training
// degree, at least 1; gamma = 1 by default): the importance weight that turns observed,
// exposure-biased pairs into an estimate for an item distribution flattened by popularity —
// the inverse-popularity re-sampling of DESIGN.md section 2, done by weighting instead of by
// drawing, so that no pair is thrown away. Recall@K is the weighted share of held-out pairs
// whose item is in the user's top K (training items excluded); the target group shares are the
// weighted shares of the held-out pairs per popularity group, i.e. what the debiased split
// itself looks like, the reference for over- and under-correction.
//
// Noise: the standard error of a weighted mean uses the Kish (1965) effective sample size
// n_eff = (sum w)^2 / sum w^2.
//
// Thread safety: functions are pure; concurrent calls on const inputs are fine.
#pragma once

#include <cstdint>
#include <span>
#include <vector>

#include "core/metrics.h"
#include "core/status.h"
#include "trainer/embeddings.h"
#include "trainer/interactions.h"

namespace plumb::trainer {

struct ValidationSample {
  std::vector<uint32_t> users;
  ItemLists relevant;            // one sorted list per entry of users
  std::vector<double> weights;   // one per pair, in the order of the lists
  double effective_pairs = 0.0;  // Kish effective sample size of the weights
};

// Groups held_out by user and weighs each pair. Pairs of users without training pairs, or of
// items outside train's index space, are left out (common practice: their rows are untrained).
// At most max_users users, chosen by a fixed hash of the user index (not the lowest indexes,
// which are the oldest users online).
ValidationSample BuildValidationSample(const Interactions& train, std::span<const Pair> held_out,
                                       size_t max_users, double gamma = 1.0);

// The sample's weighted share of pairs per popularity group (groups from popularity_groups over
// train's item degrees): the debiased split's own group shares.
std::vector<double> ValidationGroupShares(const ValidationSample& sample, const Interactions& train,
                                          size_t num_groups);

struct ValidationScores {
  std::vector<uint8_t> hits;  // per pair, in sample order
  double recall = 0.0;        // weighted share of hits
  double ndcg = 0.0;          // mean NDCG@k over the sample's users (binary gains, unweighted)
  double arp = 0.0;           // ARP@k of the users' top-k lists (training degrees)
  std::vector<double> group_shares;  // share of recommended slots per popularity group
  GroupShift shift;                  // group_share_shift(group_shares, ValidationGroupShares(...))
};

// Scores `model` on the sample at cut-off k with num_groups popularity groups. Users or items
// outside the model are misses. Errors: InvalidArgument for k == 0 or num_groups == 0.
Status ScoreOnValidation(const ValidationSample& sample, const Embeddings& model,
                         const Interactions& train, uint32_t k, size_t num_groups,
                         ValidationScores* out);

// The weighted share of `hits` (recall); NaN for an empty sample.
double WeightedRecall(const ValidationSample& sample, std::span<const uint8_t> hits);

// Standard error of the weighted mean of (a - b) over the sample's pairs (a paired comparison
// of two models' hits). NaN for an empty sample.
double PairedStandardError(const ValidationSample& sample, std::span<const uint8_t> a,
                           std::span<const uint8_t> b);

}  // namespace plumb::trainer
