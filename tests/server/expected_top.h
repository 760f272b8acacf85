// ExpectedTop: what plumb-serve must answer to Recommend(user, count) with the seen items left
// out (the wire's default) when it serves `snap`: the scorer's own answer on that snapshot,
// built in memory by the test from the same model. Same arithmetic, so even near-ties agree
// with the served list.
#pragma once

#include <gtest/gtest.h>

#include <cstdint>
#include <string>
#include <vector>

#include "server/scorer.h"
#include "server/snapshot.h"

namespace plumb::server::testing {

inline std::vector<std::string> ExpectedTop(const Snapshot& snap, const std::string& user,
                                            uint32_t count) {
  Scorer scorer;
  RankedList list;
  RecommendQuery q;
  q.user_id = user;
  q.count = count;
  q.exclude_seen = true;
  Status s = scorer.Recommend(snap, q, &list);
  EXPECT_TRUE(s.ok()) << user << ": " << s.ToString();
  std::vector<std::string> ids;
  for (const ScoredIndex& scored : list.items) ids.emplace_back(snap.item_id(scored.index));
  return ids;
}

}  // namespace plumb::server::testing
