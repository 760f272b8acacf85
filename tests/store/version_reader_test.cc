// store::VersionReader: a version's manifest, matrices, ids and only its own interactions,
// after the dictionaries and the interactions have grown past it.
#include "store/version_reader.h"

#include <gtest/gtest.h>

#include <utility>
#include <vector>

#include "tests/store/store_fixture.h"

namespace plumb::store {
namespace {

using testing::PatternMatrix;
using testing::StoreFixture;
using VersionReaderTest = StoreFixture;

TEST_F(VersionReaderTest, ReadsTheVersionAsPublishedAndNothingAddedLater) {
  AddIds(3, 4);
  StateChange pairs;
  pairs.new_interactions = {{0, 1}, {2, 3}};
  ASSERT_TRUE(store_->Commit(pairs).ok());
  const uint64_t v = Publish(2, 1.0f, true);
  // Later: a fourth member and a fifth tool, and interactions that involve them.
  AddIds(1, 1);
  StateChange later;
  later.new_interactions = {{3, 0}, {1, 4}, {1, 2}};
  ASSERT_TRUE(store_->Commit(later).ok());

  VersionReader reader;
  ASSERT_TRUE(VersionReader::Open(*store_, v, &reader).ok());
  EXPECT_EQ(reader.version(), v);
  EXPECT_EQ(reader.manifest().num_users, 3u);
  EXPECT_EQ(reader.manifest().num_items, 4u);
  std::vector<float> users(3 * 2), items(4 * 2);
  ASSERT_TRUE(reader.ReadMatrix(MatrixKind::kUsers, users).ok());
  ASSERT_TRUE(reader.ReadMatrix(MatrixKind::kItems, items).ok());
  EXPECT_EQ(users, PatternMatrix(3, 2, 1.0f));
  EXPECT_EQ(items, PatternMatrix(4, 2, 1.5f));
  std::vector<std::string> user_ids, item_ids;
  ASSERT_TRUE(reader.LoadIds(IdSpace::kUser, &user_ids).ok());
  ASSERT_TRUE(reader.LoadIds(IdSpace::kItem, &item_ids).ok());
  EXPECT_EQ(user_ids, (std::vector<std::string>{"member-0", "member-1", "member-2"}));
  EXPECT_EQ(item_ids.size(), 4u);
  // (3, 0) and (1, 4) lie outside 3 x 4; (1, 2) came later but inside, as the store keeps
  // one interaction set: it is the version's range that is filtered, in stored order.
  std::vector<std::pair<uint32_t, uint32_t>> seen;
  ASSERT_TRUE(reader.ForEachInteraction([&](uint32_t u, uint32_t i) {
                      seen.push_back({u, i});
                    })
                  .ok());
  EXPECT_EQ(seen, (std::vector<std::pair<uint32_t, uint32_t>>{{0, 1}, {1, 2}, {2, 3}}));
}

TEST_F(VersionReaderTest, AVersionNotKeptIsNotFound) {
  VersionReader reader;
  EXPECT_TRUE(VersionReader::Open(*store_, 42, &reader).IsNotFound());
}

}  // namespace
}  // namespace plumb::store
