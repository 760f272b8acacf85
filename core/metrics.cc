#include "core/metrics.h"

#include <algorithm>
#include <cassert>
#include <cmath>
#include <limits>
#include <numeric>
#include <string>

namespace plumb {

void ItemLists::Append(std::span<const uint32_t> list) {
  items_.insert(items_.end(), list.begin(), list.end());
  offsets_.push_back(items_.size());
}

void ItemLists::Reserve(std::size_t lists, std::size_t total_items) {
  offsets_.reserve(lists + 1);
  items_.reserve(total_items);
}

void ItemLists::Clear() {
  items_.clear();
  offsets_.assign(1, 0);
}

namespace {

bool Contains(std::span<const uint32_t> sorted, uint32_t item) {
  return std::binary_search(sorted.begin(), sorted.end(), item);
}

std::size_t Hits(std::span<const uint32_t> ranked, std::span<const uint32_t> relevant,
                 std::size_t k) {
  const std::size_t n = std::min(k, ranked.size());
  std::size_t hits = 0;
  for (std::size_t r = 0; r < n; ++r) hits += Contains(relevant, ranked[r]) ? 1 : 0;
  return hits;
}

}  // namespace

double recall_at_k(std::span<const uint32_t> ranked, std::span<const uint32_t> relevant,
                   std::size_t k) {
  if (relevant.empty()) return 0.0;
  return static_cast<double>(Hits(ranked, relevant, k)) / static_cast<double>(relevant.size());
}

double ndcg_at_k(std::span<const uint32_t> ranked, std::span<const uint32_t> relevant,
                 std::size_t k) {
  if (relevant.empty() || k == 0) return 0.0;
  const std::size_t n = std::min(k, ranked.size());
  double dcg = 0.0;
  for (std::size_t r = 0; r < n; ++r) {
    // Position r (0-based) is rank r + 1, discounted by log2(rank + 1) = log2(r + 2).
    if (Contains(relevant, ranked[r])) dcg += 1.0 / std::log2(static_cast<double>(r) + 2.0);
  }
  double ideal = 0.0;
  const std::size_t ideal_hits = std::min(k, relevant.size());
  for (std::size_t r = 0; r < ideal_hits; ++r)
    ideal += 1.0 / std::log2(static_cast<double>(r) + 2.0);
  return dcg / ideal;
}

double mean_popularity(std::span<const uint32_t> ranked, std::span<const uint64_t> degrees,
                       std::size_t k) {
  const std::size_t n = std::min(k, ranked.size());
  if (n == 0) return 0.0;
  double sum = 0.0;
  for (std::size_t r = 0; r < n; ++r) {
    assert(ranked[r] < degrees.size());
    sum += static_cast<double>(degrees[ranked[r]]);
  }
  return sum / static_cast<double>(n);
}

double arp_at_k(const ItemLists& lists, std::span<const uint64_t> degrees, std::size_t k) {
  double sum = 0.0;
  std::size_t counted = 0;
  for (std::size_t u = 0; u < lists.size(); ++u) {
    if (lists[u].empty() || k == 0) continue;
    sum += mean_popularity(lists[u], degrees, k);
    ++counted;
  }
  return counted == 0 ? 0.0 : sum / static_cast<double>(counted);
}

double weighted_mean_popularity(std::span<const uint64_t> counts,
                                std::span<const uint64_t> degrees) {
  const std::size_t n = std::min(counts.size(), degrees.size());
  double weighted = 0.0;
  double total = 0.0;
  for (std::size_t i = 0; i < n; ++i) {
    weighted += static_cast<double>(counts[i]) * static_cast<double>(degrees[i]);
    total += static_cast<double>(counts[i]);
  }
  return total == 0.0 ? 0.0 : weighted / total;
}

std::vector<uint64_t> exposure_counts(const ItemLists& lists, std::size_t n_items, std::size_t k) {
  std::vector<uint64_t> counts(n_items, 0);
  for (std::size_t u = 0; u < lists.size(); ++u) {
    const auto list = lists[u];
    const std::size_t n = std::min(k, list.size());
    for (std::size_t r = 0; r < n; ++r) {
      if (list[r] < n_items) ++counts[list[r]];
    }
  }
  return counts;
}

double gini(std::span<const uint64_t> counts) {
  const std::size_t n = counts.size();
  if (n == 0) return 0.0;
  std::vector<uint64_t> sorted(counts.begin(), counts.end());
  std::sort(sorted.begin(), sorted.end());
  double total = 0.0;
  double weighted = 0.0;
  const double n_d = static_cast<double>(n);
  for (std::size_t i = 0; i < n; ++i) {
    const double x = static_cast<double>(sorted[i]);
    total += x;
    // (2i − n − 1) with 1-based i = i + 1.
    weighted += (2.0 * static_cast<double>(i + 1) - n_d - 1.0) * x;
  }
  if (total == 0.0) return 0.0;
  return weighted / (n_d * total);
}

double coverage(std::span<const uint64_t> counts) {
  if (counts.empty()) return 0.0;
  const auto covered =
      std::count_if(counts.begin(), counts.end(), [](uint64_t c) { return c > 0; });
  return static_cast<double>(covered) / static_cast<double>(counts.size());
}

Status popularity_groups(std::span<const uint64_t> degrees, std::size_t num_groups,
                         std::vector<uint32_t>* group_of_item) {
  if (group_of_item == nullptr) return Status::InvalidArgument("group_of_item is null");
  if (num_groups == 0) return Status::InvalidArgument("need at least one popularity group");
  const std::size_t n = degrees.size();
  std::vector<uint32_t> order(n);
  std::iota(order.begin(), order.end(), 0u);
  std::sort(order.begin(), order.end(), [&](uint32_t a, uint32_t b) {
    return degrees[a] < degrees[b] || (degrees[a] == degrees[b] && a < b);
  });
  // 128-bit products keep the arithmetic exact: g = ceil(C · G / S) − 1.
  unsigned __int128 total = 0;
  for (uint64_t d : degrees) total += d;
  std::vector<uint32_t> groups(n, 0);
  if (total > 0) {
    const auto G = static_cast<unsigned __int128>(num_groups);
    unsigned __int128 cum = 0;
    for (uint32_t item : order) {
      cum += degrees[item];
      const unsigned __int128 upper = (cum * G + total - 1) / total;  // ceil(C · G / S)
      const std::size_t g = upper == 0 ? 0 : static_cast<std::size_t>(upper - 1);
      groups[item] = static_cast<uint32_t>(std::min(g, num_groups - 1));
    }
  }
  *group_of_item = std::move(groups);
  return Status::Ok();
}

std::vector<double> group_shares(std::span<const uint64_t> counts,
                                 std::span<const uint32_t> group_of_item, std::size_t num_groups) {
  std::vector<double> shares(num_groups, 0.0);
  const std::size_t n = std::min(counts.size(), group_of_item.size());
  double total = 0.0;
  for (std::size_t i = 0; i < n; ++i) {
    if (group_of_item[i] >= num_groups) continue;
    shares[group_of_item[i]] += static_cast<double>(counts[i]);
    total += static_cast<double>(counts[i]);
  }
  if (total > 0.0) {
    for (double& s : shares) s /= total;
  }
  return shares;
}

double js_divergence(std::span<const double> p, std::span<const double> q) {
  constexpr double kUndefined = std::numeric_limits<double>::quiet_NaN();
  if (p.size() != q.size()) return kUndefined;
  double sp = 0.0, sq = 0.0;
  for (std::size_t i = 0; i < p.size(); ++i) {
    if (!(p[i] >= 0.0) || !(q[i] >= 0.0) || !std::isfinite(p[i]) || !std::isfinite(q[i])) {
      return kUndefined;
    }
    sp += p[i];
    sq += q[i];
  }
  if (!(sp > 0.0) || !(sq > 0.0)) return kUndefined;
  double js = 0.0;
  for (std::size_t i = 0; i < p.size(); ++i) {
    const double a = p[i] / sp;
    const double b = q[i] / sq;
    const double m = 0.5 * (a + b);
    // 0 · log 0 = 0; m > 0 whenever a or b is.
    if (a > 0.0) js += 0.5 * a * std::log2(a / m);
    if (b > 0.0) js += 0.5 * b * std::log2(b / m);
  }
  // Rounding can leave a hair outside [0, 1].
  return std::clamp(js, 0.0, 1.0);
}

GroupShift group_share_shift(std::span<const double> p, std::span<const double> q) {
  const double nan = std::numeric_limits<double>::quiet_NaN();
  GroupShift out{nan, nan};
  const std::size_t G = p.size();
  if (q.size() != G || G < 2) return out;
  double sp = 0.0, sq = 0.0;
  for (std::size_t g = 0; g < G; ++g) {
    if (!(std::isfinite(p[g]) && std::isfinite(q[g]) && p[g] >= 0.0 && q[g] >= 0.0)) return out;
    sp += p[g];
    sq += q[g];
  }
  if (!(sp > 0.0 && sq > 0.0)) return out;
  double mean_p = 0.0, mean_q = 0.0, cp = 0.0, cq = 0.0, dist = 0.0;
  for (std::size_t g = 0; g < G; ++g) {
    mean_p += static_cast<double>(g) * p[g] / sp;
    mean_q += static_cast<double>(g) * q[g] / sq;
    if (g + 1 < G) {
      cp += p[g] / sp;
      cq += q[g] / sq;
      dist += std::abs(cp - cq);
    }
  }
  const double range = static_cast<double>(G - 1);
  out.shift = (mean_p - mean_q) / range;
  out.distance = dist / range;
  return out;
}

Status build_ranking_report(const ItemLists& top_k, const ItemLists& relevant,
                            std::span<const uint64_t> degrees, std::size_t k,
                            std::size_t num_groups, RankingReport* out) {
  if (out == nullptr) return Status::InvalidArgument("report output is null");
  if (k == 0) return Status::InvalidArgument("cut-off k must be positive");
  if (num_groups == 0) return Status::InvalidArgument("need at least one popularity group");
  if (top_k.size() != relevant.size()) {
    return Status::InvalidArgument("top-k lists for " + std::to_string(top_k.size()) +
                                   " users but relevant sets for " +
                                   std::to_string(relevant.size()));
  }
  const std::size_t n_items = degrees.size();
  for (std::size_t u = 0; u < top_k.size(); ++u) {
    for (uint32_t item : top_k[u]) {
      if (item >= n_items) {
        return Status::InvalidArgument("user " + std::to_string(u) + ": recommended item " +
                                       std::to_string(item) + " outside the catalogue of " +
                                       std::to_string(n_items));
      }
    }
    const auto rel = relevant[u];
    for (std::size_t j = 0; j < rel.size(); ++j) {
      if (rel[j] >= n_items) {
        return Status::InvalidArgument("user " + std::to_string(u) + ": relevant item " +
                                       std::to_string(rel[j]) + " outside the catalogue of " +
                                       std::to_string(n_items));
      }
      if (j > 0 && rel[j] <= rel[j - 1]) {
        return Status::InvalidArgument("user " + std::to_string(u) +
                                       ": relevant items are not strictly ascending");
      }
    }
  }

  std::vector<uint32_t> group_of_item;
  PLUMB_RETURN_IF_ERROR(popularity_groups(degrees, num_groups, &group_of_item));

  // Restrict every figure to users with test items, so that accuracy and popularity figures
  // describe the same population.
  ItemLists evaluated_lists;
  std::vector<uint64_t> test_counts(n_items, 0);
  double recall_sum = 0.0, ndcg_sum = 0.0;
  std::size_t users = 0;
  for (std::size_t u = 0; u < top_k.size(); ++u) {
    const auto rel = relevant[u];
    if (rel.empty()) continue;
    ++users;
    recall_sum += recall_at_k(top_k[u], rel, k);
    ndcg_sum += ndcg_at_k(top_k[u], rel, k);
    evaluated_lists.Append(top_k[u].subspan(0, std::min(k, top_k[u].size())));
    for (uint32_t item : rel) ++test_counts[item];
  }

  RankingReport report;
  report.k = k;
  report.users_evaluated = users;
  if (users > 0) {
    report.recall = recall_sum / static_cast<double>(users);
    report.ndcg = ndcg_sum / static_cast<double>(users);
  }
  report.arp = arp_at_k(evaluated_lists, degrees, k);
  const std::vector<uint64_t> exposure = exposure_counts(evaluated_lists, n_items, k);
  report.gini = gini(exposure);
  report.coverage = coverage(exposure);
  report.rec_group_shares = group_shares(exposure, group_of_item, num_groups);
  report.test_group_shares = group_shares(test_counts, group_of_item, num_groups);
  report.group_share_js = js_divergence(report.rec_group_shares, report.test_group_shares);
  report.group_shift = group_share_shift(report.rec_group_shares, report.test_group_shares);
  *out = std::move(report);
  return Status::Ok();
}

}  // namespace plumb
