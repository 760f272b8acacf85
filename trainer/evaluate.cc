#include "trainer/evaluate.h"

#include <algorithm>
#include <cmath>
#include <limits>
#include <string>
#include <thread>
#include <vector>

#include "core/scan.h"
#include "core/topk.h"

namespace plumb::trainer {

namespace {

// Test users (ascending) and their relevant items (sorted, distinct, not in train).
struct TestSets {
  std::vector<uint32_t> users;
  std::vector<std::vector<uint32_t>> items;
};

Status GroupTest(std::span<const Pair> test, const Interactions& train, uint32_t num_users,
                 uint32_t num_items, TestSets* out) {
  std::vector<Pair> sorted(test.begin(), test.end());
  for (const Pair& p : sorted) {
    if (p.user >= num_users || p.item >= num_items) {
      return Status::InvalidArgument("test pair (user " + std::to_string(p.user) + ", item " +
                                     std::to_string(p.item) + ") is outside the model (" +
                                     std::to_string(num_users) + " users, " +
                                     std::to_string(num_items) + " items)");
    }
  }
  std::sort(sorted.begin(), sorted.end(), [](const Pair& a, const Pair& b) {
    return a.user != b.user ? a.user < b.user : a.item < b.item;
  });
  for (size_t n = 0; n < sorted.size(); ++n) {
    const Pair& p = sorted[n];
    if (n > 0 && p == sorted[n - 1]) continue;
    if (train.Contains(p.user, p.item)) continue;
    if (out->users.empty() || out->users.back() != p.user) {
      out->users.push_back(p.user);
      out->items.emplace_back();
    }
    out->items.back().push_back(p.item);
  }
  return Status::Ok();
}

Status CheckOptions(const EvalOptions& o) {
  if (o.k == 0 || o.num_groups == 0 || o.threads == 0) {
    return Status::InvalidArgument("evaluation needs k, num_groups and threads > 0");
  }
  return Status::Ok();
}

// Runs rank(thread, user, selector) for every test user on `threads` threads and collects
// the lists in test-user order.
template <typename RankFn>
Status RankAll(const TestSets& sets, uint32_t k, uint32_t threads, const RankFn& rank,
               ItemLists* lists) {
  std::vector<std::vector<uint32_t>> top(sets.users.size());
  std::vector<Status> errors(threads);
  auto work = [&](uint32_t t) {
    TopKSelector selector;
    for (size_t n = t; n < sets.users.size(); n += threads) {
      selector.Reset(k);
      Status s = rank(t, sets.users[n], &selector);
      if (!s.ok()) {
        errors[t] = s;
        return;
      }
      for (const ScoredIndex& c : selector.SortedResult()) top[n].push_back(c.index);
    }
  };
  if (threads == 1) {
    work(0);
  } else {
    std::vector<std::thread> pool;
    for (uint32_t t = 0; t < threads; ++t) pool.emplace_back(work, t);
    for (auto& th : pool) th.join();
  }
  for (const Status& s : errors) PLUMB_RETURN_IF_ERROR(s);
  for (const auto& l : top) lists->Append(l);
  return Status::Ok();
}

Status Report(const TestSets& sets, const ItemLists& top, const Interactions& train,
              uint32_t num_items, const EvalOptions& o, RankingReport* out) {
  ItemLists relevant;
  for (const auto& items : sets.items) relevant.Append(items);
  std::vector<uint64_t> degrees(num_items, 0);
  for (uint32_t i = 0; i < num_items; ++i) degrees[i] = train.item_degree(i);
  return build_ranking_report(top, relevant, degrees, o.k, o.num_groups, out);
}

}  // namespace

Status EvaluateModel(const Embeddings& model, const Interactions& train, std::span<const Pair> test,
                     const EvalOptions& options, RankingReport* out) {
  PLUMB_RETURN_IF_ERROR(CheckOptions(options));
  if (model.num_items() < train.num_items()) {
    return Status::InvalidArgument("the model has fewer items (" +
                                   std::to_string(model.num_items()) + ") than the data (" +
                                   std::to_string(train.num_items()) + ")");
  }
  TestSets sets;
  PLUMB_RETURN_IF_ERROR(GroupTest(test, train, model.num_users(), model.num_items(), &sets));
  const MatrixView items = model.item_view();
  ItemLists top;
  const uint32_t threads = options.threads;
  std::vector<std::vector<float>> scratch(threads, std::vector<float>(kDefaultScanBlockRows));
  auto rank = [&](uint32_t t, uint32_t user, TopKSelector* selector) {
    std::vector<float>& buf = scratch[t];
    Exclusions excluded;
    excluded.sorted_rows = train.items_of(user);
    ScanOutcome outcome;
    return top_k_by_dot(items, std::span<const float>(model.user_row(user), model.dim()), excluded,
                        buf, selector, &outcome);
  };
  PLUMB_RETURN_IF_ERROR(RankAll(sets, options.k, threads, rank, &top));
  return Report(sets, top, train, model.num_items(), options, out);
}

Status EvaluateScorer(const UserScorer& scorer, uint32_t num_items, const Interactions& train,
                      std::span<const Pair> test, const EvalOptions& options, RankingReport* out) {
  PLUMB_RETURN_IF_ERROR(CheckOptions(options));
  if (num_items < train.num_items()) {
    return Status::InvalidArgument("the scorer covers fewer items than the data");
  }
  TestSets sets;
  PLUMB_RETURN_IF_ERROR(
      GroupTest(test, train, std::numeric_limits<uint32_t>::max(), num_items, &sets));
  const uint32_t threads = options.threads;
  std::vector<std::vector<float>> scores(threads, std::vector<float>(num_items));
  auto rank = [&](uint32_t t, uint32_t user, TopKSelector* selector) {
    std::vector<float>& buf = scores[t];
    scorer(user, buf);
    for (uint32_t i : train.items_of(user)) {
      if (i < num_items) buf[i] = std::numeric_limits<float>::quiet_NaN();  // excluded
    }
    for (uint32_t i = 0; i < num_items; ++i) selector->Push(i, buf[i]);
    return Status::Ok();
  };
  ItemLists top;
  PLUMB_RETURN_IF_ERROR(RankAll(sets, options.k, threads, rank, &top));
  return Report(sets, top, train, num_items, options, out);
}

}  // namespace plumb::trainer
