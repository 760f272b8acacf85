// Splitting an event history into training, validation and test parts for offline
// evaluation (`plumb split`). The unit is the (user, item) pair: every event of a pair goes
// to the same part, so that no test pair is also a training pair (plumb never recommends a
// user's own training items, so such a pair could only ever count as a miss).
//
// Three kinds:
//  - random:   round(holdout_fraction · P) of the P distinct pairs, drawn uniformly without
//              replacement, are held out.
//  - temporal: per user, the pairs ordered by their earliest event's ts (ties: the order in
//              which the pairs first appear in the file); the last
//              h_u = min(round(holdout_fraction · n_u), n_u - 1) of the user's n_u pairs are
//              held out, so every user keeps at least one training pair. Needs a ts on every
//              event.
//  - debiased: the random hold-out, then each held-out pair is kept with probability
//              (min_pop / pop(item))^gamma (core/split.h keep_probability; pop = the item's
//              distinct users among the pairs not held out), which under-represents popular
//              items as DESIGN.md section 2 describes; the held-out pairs not kept go back to
//              training. The kept pairs are the evaluation sample.
// Of the pairs held out (debiased: kept), a share validation_fraction goes to validation and
// the rest to test: random and debiased pick them at random, temporal takes the earlier ones
// of each user's held-out pairs for validation (round(validation_fraction · h_u) of them).
//
// Rounding is std::llround (half away from zero). The same rows, options and seed give the
// same split on every platform (trainer::Rng and core's own uniform draws, no std
// distributions). Thread-safe: a pure function.
#pragma once

#include <cstddef>
#include <cstdint>
#include <span>
#include <string>
#include <vector>

#include "cli/csv_reader.h"
#include "core/status.h"

namespace plumb::cli {

enum class SplitKind { kRandom, kTemporal, kDebiased };

// "random", "temporal" or "debiased"; InvalidArgument otherwise.
Status ParseSplitKind(const std::string& name, SplitKind* out);

struct EventSplitOptions {
  SplitKind kind = SplitKind::kRandom;
  double holdout_fraction = 0.2;     // in (0, 1)
  double validation_fraction = 0.0;  // share of the held-out (kept) pairs; in [0, 1]
  double gamma = 1.0;                // debiased: exponent of the inverse popularity
  uint64_t seed = 1;
};

struct EventSplit {
  // Row indexes into the input, ascending. Training keeps every event of its pairs; the
  // validation and test parts hold one row per pair, its first event.
  std::vector<size_t> train_rows;
  std::vector<size_t> validation_rows;
  std::vector<size_t> test_rows;
  size_t pairs = 0;     // distinct (user, item) pairs in the input
  size_t held_out = 0;  // pairs held out before thinning (random, temporal: = kept)
  size_t kept = 0;      // held-out pairs in validation or test
  // Validation and test pairs whose user, or whose item, has no training pair: a model
  // fitted on the training part cannot score them (plumb eval leaves them out and says so).
  size_t cold_user_pairs = 0;
  size_t cold_item_pairs = 0;
};

// Splits `rows` as described at the top of the file. Errors (InvalidArgument, *out
// unchanged): no rows; holdout_fraction outside (0, 1); validation_fraction outside [0, 1];
// gamma negative or not finite; a temporal split of rows without a ts (naming the first
// such row, 1-based among the data rows).
Status SplitEvents(std::span<const CsvEvent> rows, const EventSplitOptions& options,
                   EventSplit* out);

}  // namespace plumb::cli
