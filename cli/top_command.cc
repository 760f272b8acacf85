// plumb top: a user's top-N list from a stored version, offline — the same exact ranking the
// server computes (dot product over all items, the user's training items excluded).
#include <cstdio>

#include "cli/commands.h"
#include "cli/item_names.h"
#include "cli/store_access.h"
#include "core/scan.h"
#include "core/topk.h"

namespace plumb::cli {

Status RunTop(const TopArgs& args) {
  if (args.users.empty()) return Status::InvalidArgument("--user is required");
  if (args.count == 0) return Status::InvalidArgument("--count must be at least 1");
  std::unique_ptr<store::Store> store;
  PLUMB_RETURN_IF_ERROR(OpenForRead(args.db, &store));
  LoadedModel m;
  PLUMB_RETURN_IF_ERROR(LoadModel(*store, args.version, &m));

  ItemNames names;
  if (!args.names.empty()) PLUMB_RETURN_IF_ERROR(ItemNames::Read(args.names, &names));

  std::unordered_map<std::string, uint32_t> user_index;
  for (uint32_t u = 0; u < m.user_ids.size(); ++u) user_index.emplace(m.user_ids[u], u);
  TopKSelector selector(args.count);
  std::vector<float> scratch(kDefaultScanBlockRows);
  for (const std::string& user : args.users) {
    auto it = user_index.find(user);
    if (it == user_index.end()) {
      return Status::NotFound("user '" + user + "' is not in version " +
                              std::to_string(m.manifest.version));
    }
    const uint32_t u = it->second;
    selector.Reset(args.count);
    Exclusions ex;
    if (!args.include_seen) ex.sorted_rows = m.train.items_of(u);
    ScanOutcome outcome;
    PLUMB_RETURN_IF_ERROR(top_k_by_dot(m.model.item_view(),
                                       std::span<const float>(m.model.user_row(u), m.model.dim()),
                                       ex, scratch, &selector, &outcome));
    std::printf("%s — top %u from version %llu (%s), %zu training items excluded\n", user.c_str(),
                args.count, static_cast<unsigned long long>(m.manifest.version),
                m.manifest.objective.c_str(), ex.sorted_rows.size());
    int rank = 0;
    for (const ScoredIndex& s : selector.SortedResult()) {
      const std::string& id = m.item_ids[s.index];
      // The item's training degree: how many users interacted with it in the training data
      // (popularity), whatever the data is about.
      std::printf("  %2d. %-8s %-36s %8.4f  (%u users in training)\n", ++rank, id.c_str(),
                  names.Find(id).c_str(), s.score, m.train.item_degree(s.index));
    }
  }
  return Status::Ok();
}

}  // namespace plumb::cli
