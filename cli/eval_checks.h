// Mistakes that leave an evaluation running but its figures meaningless: the command still
// prints its table (exit 0), and these sentences say what is wrong with it. Each function
// returns the warning, or an empty string when there is nothing to say; callers print it on
// stderr.
#pragma once

#include <cstddef>
#include <cstdint>
#include <span>
#include <string>

#include "trainer/interactions.h"

namespace plumb::cli {

// K at least the number of items: a top-K list then holds every item the user has not had,
// whatever the model, so Recall@K and the group shares describe the catalogue, not the
// ranking.
std::string LargeKWarning(uint32_t k, uint32_t num_items);

// Test pairs that are also training pairs of the model. plumb never recommends a user's own
// training items, so evaluation leaves such pairs out; when all of them are (the test file
// is the training file, say) nothing is evaluated and every figure is 0.
size_t CountTrainingPairs(const trainer::Interactions& train, std::span<const trainer::Pair> test);

// The warning for `overlapping` of `total` test pairs being training pairs of `model` (a
// name such as "version 3"): a note for a few, a warning that asks whether the test file is
// the training file from half of them on.
std::string TrainingOverlapWarning(size_t overlapping, size_t total, const std::string& model);

}  // namespace plumb::cli
