#include "cli/event_split.h"

#include <algorithm>
#include <cmath>
#include <numeric>
#include <unordered_map>
#include <unordered_set>

#include "core/split.h"
#include "trainer/rng.h"

namespace plumb::cli {
namespace {

enum class Part : uint8_t { kTrain, kValidation, kTest };

struct PairInfo {
  uint32_t user = 0;
  uint32_t item = 0;
  size_t first_row = 0;  // first event of the pair in file order
  int64_t earliest_ts = 0;
  Part part = Part::kTrain;
};

size_t Round(double x) { return static_cast<size_t>(std::llround(x)); }

// Fisher–Yates over [0, n) with trainer::Rng: the same seed gives the same order everywhere.
std::vector<size_t> Shuffled(size_t n, uint64_t seed) {
  std::vector<size_t> order(n);
  std::iota(order.begin(), order.end(), size_t{0});
  trainer::Rng rng(seed);
  for (size_t i = n; i > 1; --i) std::swap(order[i - 1], order[rng.Uniform(i)]);
  return order;
}

}  // namespace

Status ParseSplitKind(const std::string& name, SplitKind* out) {
  if (name == "random")
    *out = SplitKind::kRandom;
  else if (name == "temporal")
    *out = SplitKind::kTemporal;
  else if (name == "debiased")
    *out = SplitKind::kDebiased;
  else
    return Status::InvalidArgument("split kind '" + name + "': use random, temporal or debiased");
  return Status::Ok();
}

Status SplitEvents(std::span<const CsvEvent> rows, const EventSplitOptions& options,
                   EventSplit* out) {
  if (rows.empty()) return Status::InvalidArgument("no events to split");
  if (!(options.holdout_fraction > 0.0 && options.holdout_fraction < 1.0)) {
    return Status::InvalidArgument("the hold-out fraction must lie in (0, 1)");
  }
  if (!(options.validation_fraction >= 0.0 && options.validation_fraction <= 1.0)) {
    return Status::InvalidArgument("the validation fraction must lie in [0, 1]");
  }
  if (!std::isfinite(options.gamma) || options.gamma < 0.0) {
    return Status::InvalidArgument("gamma must be finite and >= 0");
  }
  if (options.kind == SplitKind::kTemporal) {
    for (size_t r = 0; r < rows.size(); ++r) {
      if (rows[r].timestamp_ms <= 0) {
        return Status::InvalidArgument("a temporal split needs a ts on every event; data row " +
                                       std::to_string(r + 1) + " has none");
      }
    }
  }

  // Dense users, items and pairs, in order of first appearance.
  std::unordered_map<std::string, uint32_t> users, items;
  std::unordered_map<uint64_t, size_t> pair_index;
  std::vector<PairInfo> pairs;
  std::vector<size_t> pair_of_row(rows.size());
  for (size_t r = 0; r < rows.size(); ++r) {
    const uint32_t u =
        users.try_emplace(rows[r].user, static_cast<uint32_t>(users.size())).first->second;
    const uint32_t i =
        items.try_emplace(rows[r].item, static_cast<uint32_t>(items.size())).first->second;
    const uint64_t key = (static_cast<uint64_t>(u) << 32) | i;
    auto [it, fresh] = pair_index.try_emplace(key, pairs.size());
    if (fresh) pairs.push_back({u, i, r, rows[r].timestamp_ms, Part::kTrain});
    PairInfo& p = pairs[it->second];
    p.earliest_ts = std::min(p.earliest_ts, rows[r].timestamp_ms);
    pair_of_row[r] = it->second;
  }

  EventSplit split;
  split.pairs = pairs.size();
  const double hf = options.holdout_fraction, vf = options.validation_fraction;
  if (options.kind == SplitKind::kTemporal) {
    std::vector<std::vector<size_t>> by_user(users.size());
    for (size_t p = 0; p < pairs.size(); ++p) by_user[pairs[p].user].push_back(p);
    for (std::vector<size_t>& list : by_user) {
      // Pairs are numbered in order of first appearance, so the index breaks ts ties.
      std::stable_sort(list.begin(), list.end(), [&](size_t a, size_t b) {
        return pairs[a].earliest_ts < pairs[b].earliest_ts;
      });
      const size_t n = list.size();
      const size_t h = std::min(Round(hf * static_cast<double>(n)), n - 1);
      const size_t v = Round(vf * static_cast<double>(h));
      for (size_t j = n - h; j < n; ++j) {
        pairs[list[j]].part = j < n - h + v ? Part::kValidation : Part::kTest;
      }
      split.held_out += h;
    }
  } else {
    const std::vector<size_t> order = Shuffled(pairs.size(), options.seed);
    const size_t h = Round(hf * static_cast<double>(pairs.size()));
    split.held_out = h;
    if (options.kind == SplitKind::kRandom) {
      const size_t v = Round(vf * static_cast<double>(h));
      for (size_t j = 0; j < h; ++j) pairs[order[j]].part = j < v ? Part::kValidation : Part::kTest;
    } else {
      std::vector<uint8_t> held(pairs.size(), 0);
      for (size_t j = 0; j < h; ++j) held[order[j]] = 1;
      std::vector<uint64_t> degrees(items.size(), 0);
      for (size_t p = 0; p < pairs.size(); ++p) {
        if (!held[p]) ++degrees[pairs[p].item];
      }
      std::vector<Interaction> held_out;
      for (size_t p = 0; p < pairs.size(); ++p) {
        if (held[p]) held_out.push_back({pairs[p].user, pairs[p].item});
      }
      SplitOptions so;
      so.gamma = options.gamma;
      so.validation_fraction = vf;
      so.seed = trainer::mix_seed(options.seed, 0x64656269);
      DebiasedSplit ds;
      PLUMB_RETURN_IF_ERROR(debiased_split(held_out, degrees, so, &ds));
      auto mark = [&](const std::vector<Interaction>& list, Part part) {
        for (const Interaction& x : list) {
          pairs[pair_index.at((static_cast<uint64_t>(x.user) << 32) | x.item)].part = part;
        }
      };
      mark(ds.validation, Part::kValidation);
      mark(ds.test, Part::kTest);
    }
  }

  std::vector<uint8_t> user_trained(users.size(), 0), item_trained(items.size(), 0);
  for (const PairInfo& p : pairs) {
    if (p.part == Part::kTrain) {
      user_trained[p.user] = 1;
      item_trained[p.item] = 1;
    } else {
      ++split.kept;
    }
  }
  for (const PairInfo& p : pairs) {
    if (p.part == Part::kTrain) continue;
    split.cold_user_pairs += user_trained[p.user] ? 0 : 1;
    split.cold_item_pairs += item_trained[p.item] ? 0 : 1;
    (p.part == Part::kValidation ? split.validation_rows : split.test_rows).push_back(p.first_row);
  }
  for (size_t r = 0; r < rows.size(); ++r) {
    if (pairs[pair_of_row[r]].part == Part::kTrain) split.train_rows.push_back(r);
  }
  std::sort(split.validation_rows.begin(), split.validation_rows.end());
  std::sort(split.test_rows.begin(), split.test_rows.end());
  *out = std::move(split);
  return Status::Ok();
}

}  // namespace plumb::cli
