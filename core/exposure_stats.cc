#include "core/exposure_stats.h"

#include <numeric>
#include <string>

#include "core/metrics.h"

namespace plumb {

Status summarize_exposure(std::span<const uint64_t> exposure_counts,
                          std::span<const uint64_t> item_degrees,
                          std::span<const uint32_t> group_of_item, std::size_t num_groups,
                          ExposureSummary* out) {
  if (out == nullptr) return Status::InvalidArgument("exposure summary output is null");
  if (num_groups == 0) return Status::InvalidArgument("need at least one popularity group");
  if (exposure_counts.size() != item_degrees.size() ||
      group_of_item.size() != item_degrees.size()) {
    return Status::InvalidArgument(
        "exposure counts, degrees and groups must cover the same items (" +
        std::to_string(exposure_counts.size()) + ", " + std::to_string(item_degrees.size()) + ", " +
        std::to_string(group_of_item.size()) + ")");
  }
  for (uint32_t g : group_of_item) {
    if (g >= num_groups) {
      return Status::InvalidArgument("group id " + std::to_string(g) +
                                     " >= " + std::to_string(num_groups) + " groups");
    }
  }
  ExposureSummary s;
  s.total_exposures = std::accumulate(exposure_counts.begin(), exposure_counts.end(), uint64_t{0});
  s.arp = weighted_mean_popularity(exposure_counts, item_degrees);
  s.gini = gini(exposure_counts);
  s.coverage = coverage(exposure_counts);
  s.exposure_group_shares = group_shares(exposure_counts, group_of_item, num_groups);
  s.interaction_group_shares = group_shares(item_degrees, group_of_item, num_groups);
  s.drift_js = js_divergence(s.exposure_group_shares, s.interaction_group_shares);
  *out = std::move(s);
  return Status::Ok();
}

}  // namespace plumb
