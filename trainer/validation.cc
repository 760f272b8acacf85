#include "trainer/validation.h"

#include <algorithm>
#include <cmath>

#include "core/scan.h"
#include "core/topk.h"

namespace plumb::trainer {
namespace {

// Orders users for the max_users cut: splitmix64 of the index, a fixed permutation.
uint64_t UserOrderKey(uint32_t user) {
  uint64_t z = user + 0x9E3779B97F4A7C15ULL;
  z = (z ^ (z >> 30)) * 0xBF58476D1CE4E5B9ULL;
  z = (z ^ (z >> 27)) * 0x94D049BB133111EBULL;
  return z ^ (z >> 31);
}

std::vector<uint64_t> Degrees(const Interactions& train) {
  std::vector<uint64_t> d(train.num_items());
  for (uint32_t i = 0; i < d.size(); ++i) d[i] = train.item_degree(i);
  return d;
}

}  // namespace

ValidationSample BuildValidationSample(const Interactions& train, std::span<const Pair> held_out,
                                       size_t max_users, double gamma) {
  ValidationSample sample;
  std::vector<Pair> held;
  held.reserve(held_out.size());
  for (const Pair& p : held_out) {
    if (p.item < train.num_items() && train.user_degree(p.user) > 0) held.push_back(p);
  }
  std::sort(held.begin(), held.end(), [](const Pair& a, const Pair& b) {
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
      const double pop = std::max<uint32_t>(1, train.item_degree(i));
      const double w = gamma == 1.0 ? 1.0 / pop : std::pow(pop, -gamma);
      sample.weights.push_back(w);
      sum += w;
      sum_sq += w * w;
    }
  }
  sample.effective_pairs = sum_sq > 0.0 ? sum * sum / sum_sq : 0.0;
  return sample;
}

std::vector<double> ValidationGroupShares(const ValidationSample& sample, const Interactions& train,
                                          size_t num_groups) {
  std::vector<double> shares(num_groups, 0.0);
  std::vector<uint32_t> group_of;
  if (num_groups == 0 || !popularity_groups(Degrees(train), num_groups, &group_of).ok()) {
    return shares;
  }
  double total = 0.0;
  size_t p = 0;
  for (size_t n = 0; n < sample.users.size(); ++n) {
    for (uint32_t i : sample.relevant[n]) {
      const double w = sample.weights[p++];
      if (i < group_of.size()) shares[group_of[i]] += w;
      total += w;
    }
  }
  if (total > 0.0) {
    for (double& s : shares) s /= total;
  }
  return shares;
}

Status ScoreOnValidation(const ValidationSample& sample, const Embeddings& model,
                         const Interactions& train, uint32_t k, size_t num_groups,
                         ValidationScores* out) {
  if (k == 0 || num_groups == 0) {
    return Status::InvalidArgument("validation needs k >= 1 and at least one group");
  }
  ValidationScores r;
  r.hits.reserve(sample.weights.size());
  const std::vector<uint64_t> degrees = Degrees(train);
  TopKSelector selector(k);
  std::vector<float> scratch(kDefaultScanBlockRows);
  std::vector<uint32_t> ranked, sorted;
  ItemLists lists;
  const MatrixView items = model.item_view();
  double ndcg = 0.0;
  for (size_t n = 0; n < sample.users.size(); ++n) {
    const uint32_t u = sample.users[n];
    ranked.clear();
    if (u < model.num_users() && model.num_items() > 0) {
      selector.Reset(k);
      Exclusions ex;
      ex.sorted_rows = train.items_of(u);
      ScanOutcome outcome;
      std::span<const float> query(model.user_row(u), model.dim());
      if (top_k_by_dot(items, query, ex, scratch, &selector, &outcome).ok()) {
        for (const ScoredIndex& s : selector.SortedResult()) {
          if (s.index < degrees.size()) ranked.push_back(s.index);
        }
      }
    }
    lists.Append(ranked);
    ndcg += ndcg_at_k(ranked, sample.relevant[n], k);
    sorted = ranked;
    std::sort(sorted.begin(), sorted.end());
    for (uint32_t i : sample.relevant[n]) {
      r.hits.push_back(std::binary_search(sorted.begin(), sorted.end(), i) ? 1 : 0);
    }
  }
  r.recall = WeightedRecall(sample, r.hits);
  r.ndcg = sample.users.empty() ? std::nan("") : ndcg / static_cast<double>(sample.users.size());
  r.arp = arp_at_k(lists, degrees, k);
  std::vector<uint32_t> group_of;
  PLUMB_RETURN_IF_ERROR(popularity_groups(degrees, num_groups, &group_of));
  r.group_shares = group_shares(exposure_counts(lists, degrees.size(), k), group_of, num_groups);
  r.shift = group_share_shift(r.group_shares, ValidationGroupShares(sample, train, num_groups));
  *out = std::move(r);
  return Status::Ok();
}

double WeightedRecall(const ValidationSample& sample, std::span<const uint8_t> hits) {
  double sum = 0.0, hit = 0.0;
  for (size_t p = 0; p < hits.size() && p < sample.weights.size(); ++p) {
    sum += sample.weights[p];
    hit += sample.weights[p] * hits[p];
  }
  return sum > 0.0 ? hit / sum : std::nan("");
}

double PairedStandardError(const ValidationSample& sample, std::span<const uint8_t> a,
                           std::span<const uint8_t> b) {
  const size_t n = std::min({a.size(), b.size(), sample.weights.size()});
  double sum = 0.0, mean = 0.0;
  for (size_t p = 0; p < n; ++p) {
    sum += sample.weights[p];
    mean += sample.weights[p] * (static_cast<double>(a[p]) - b[p]);
  }
  if (!(sum > 0.0) || !(sample.effective_pairs > 0.0)) return std::nan("");
  mean /= sum;
  double var = 0.0;
  for (size_t p = 0; p < n; ++p) {
    const double d = static_cast<double>(a[p]) - b[p] - mean;
    var += sample.weights[p] * d * d;
  }
  var /= sum;
  return std::sqrt(var / sample.effective_pairs);
}

}  // namespace plumb::trainer
