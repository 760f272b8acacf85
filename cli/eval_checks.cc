#include "cli/eval_checks.h"

#include <cstdio>

namespace plumb::cli {

std::string LargeKWarning(uint32_t k, uint32_t num_items) {
  if (k < num_items) return "";
  char buf[320];
  std::snprintf(buf, sizeof buf,
                "warning: K = %u is at least the catalogue (%u items): every top-K list holds "
                "every item the user has not had, whatever the model, so Recall@K and the group "
                "shares say nothing about the ranking; choose a K below %u",
                k, num_items, num_items);
  return buf;
}

size_t CountTrainingPairs(const trainer::Interactions& train, std::span<const trainer::Pair> test) {
  size_t n = 0;
  for (const trainer::Pair& p : test) n += train.Contains(p.user, p.item) ? 1 : 0;
  return n;
}

std::string TrainingOverlapWarning(size_t overlapping, size_t total, const std::string& model) {
  if (overlapping == 0 || total == 0) return "";
  char buf[512];
  if (2 * overlapping < total) {
    std::snprintf(buf, sizeof buf,
                  "note: %zu of %zu test pairs are training pairs of %s; a user's own training "
                  "items are never recommended, so they are left out",
                  overlapping, total, model.c_str());
  } else {
    std::snprintf(buf, sizeof buf,
                  "warning: %zu of %zu test pairs (%.0f %%) are training pairs of %s; a user's "
                  "own training items are never recommended, so they are left out%s. Is the "
                  "test file the training file? Hold pairs out first (plumb split) and fit on "
                  "the rest",
                  overlapping, total, 100.0 * static_cast<double>(overlapping) / total,
                  model.c_str(),
                  overlapping == total ? " and nothing is evaluated: every figure is 0" : "");
  }
  return buf;
}

}  // namespace plumb::cli
