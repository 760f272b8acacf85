// Exposure concentration figures over per-item counts of served recommendations, for the
// server's exposure monitor (DESIGN.md §6). The monitor keeps the counts over its sliding
// window; these functions turn counts into gauge values, reusing the offline metrics so that
// the live gauges and the offline report measure the same thing.
#pragma once

#include <cstddef>
#include <cstdint>
#include <span>
#include <vector>

#include "core/status.h"

namespace plumb {

struct ExposureSummary {
  uint64_t total_exposures = 0;  // Σ exposure counts (served slots in the window)
  // Mean training degree of a served slot (weighted_mean_popularity). With fixed-length
  // lists this is ARP over the window's lists (Abdollahpouri et al., 2019).
  double arp = 0.0;
  double gini = 0.0;      // Gini of the exposure counts over the whole catalogue
  double coverage = 0.0;  // fraction of the catalogue served at least once
  std::vector<double> exposure_group_shares;     // share of served slots per popularity group
  std::vector<double> interaction_group_shares;  // share of training interactions per group
  // js_divergence(exposure_group_shares, interaction_group_shares) in bits, [0, 1]; NaN when
  // nothing was served yet.
  double drift_js = 0.0;
};

// Summarises exposure_counts[i] (times item i was served) against item_degrees[i] (training
// interactions of item i), with group_of_item from popularity_groups(item_degrees,
// num_groups). Allocates (the result vectors and a sorted copy for Gini): call it on a timer,
// not per request. Thread-safe.
// Errors (InvalidArgument, *out unchanged): the three spans differ in size, num_groups == 0,
// a group id >= num_groups, or out null.
Status summarize_exposure(std::span<const uint64_t> exposure_counts,
                          std::span<const uint64_t> item_degrees,
                          std::span<const uint32_t> group_of_item, std::size_t num_groups,
                          ExposureSummary* out);

}  // namespace plumb
