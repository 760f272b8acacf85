// The approximate path of Recommend and SimilarItems against the exact scan, on a trained
// model: learned item vectors have uneven norms (popular items tend to be longer), which is
// where a graph index can drift toward the head. Checked: recall@20 of the approximate
// answers against the exact ones, the popularity-group shares of their slots, exclusions
// honoured, scores exact, and the exact fallback.
#include <gtest/gtest.h>

#include <algorithm>
#include <cmath>
#include <cstdio>
#include <set>
#include <string>
#include <vector>

#include "core/metrics.h"
#include "server/scorer.h"
#include "server/snapshot.h"
#include "trainer/embeddings.h"
#include "trainer/synth.h"
#include "trainer/trainer.h"

namespace plumb::server {
namespace {

using trainer::Embeddings;
using trainer::Interactions;

constexpr uint32_t kCount = 20;
constexpr size_t kGroups = 5;

// A synthetic world (2,000 members x 8,000 tools, strong skew) fitted with CPR: a trained
// model, built once for the whole suite.
struct TrainedWorld {
  trainer::SynthWorld world;
  Interactions train;
  Embeddings model;
};

const TrainedWorld& World() {
  static const TrainedWorld* w = [] {
    auto* t = new TrainedWorld();
    trainer::SynthOptions so;
    so.users = 2000;
    so.items = 8000;
    so.zipf = 1.1;
    so.target_interactions = 80000;
    so.seed = 5;
    EXPECT_TRUE(trainer::GenerateSynthWorld(so, &t->world).ok());
    EXPECT_TRUE(t->world.TrainInteractions(&t->train).ok());
    EXPECT_TRUE(Embeddings::Create(32, so.users, so.items, 3, &t->model).ok());
    trainer::TrainOptions o;  // CPR, beta 3 (plumb's default objective)
    o.learning_rate = 0.05f;
    o.l2 = 1e-3f;
    o.batch_size = 256;
    o.threads = 2;
    std::unique_ptr<trainer::FitLoop> loop;
    EXPECT_TRUE(trainer::FitLoop::Create(o, &t->model, &t->train, &loop).ok());
    EXPECT_TRUE(loop->RunEpochs(15).ok());
    return t;
  }();
  return *w;
}

std::shared_ptr<const Snapshot> Build(const TrainedWorld& t, uint32_t min_items,
                                      uint32_t max_overfetch = 2000) {
  const uint32_t users = t.model.num_users(), items = t.model.num_items(), dim = t.model.dim();
  SnapshotParts p;
  p.version = 1;
  p.items = ItemMatrix(items, dim);
  p.users = ItemMatrix(users, dim);
  std::copy(t.model.items().data(), t.model.items().data() + size_t{items} * dim, p.items.data());
  std::copy(t.model.users().data(), t.model.users().data() + size_t{users} * dim, p.users.data());
  for (uint32_t i = 0; i < items; ++i) {
    p.item_ids.push_back(trainer::ToolLabel(i));
    p.item_degrees.push_back(t.train.item_degree(i));
  }
  p.seen_offsets.push_back(0);
  for (uint32_t u = 0; u < users; ++u) {
    p.user_ids.push_back(trainer::MemberLabel(u));
    std::vector<uint32_t> seen(t.train.items_of(u).begin(), t.train.items_of(u).end());
    std::sort(seen.begin(), seen.end());
    p.seen_items.insert(p.seen_items.end(), seen.begin(), seen.end());
    p.seen_offsets.push_back(p.seen_items.size());
  }
  p.approx.min_items = min_items;
  p.approx.max_overfetch = max_overfetch;
  p.approx.index.build_threads = 2;
  std::shared_ptr<const Snapshot> snap;
  Status s = Snapshot::Build(std::move(p), &snap);
  EXPECT_TRUE(s.ok()) << s.ToString();
  return snap;
}

double Overlap(const RankedList& a, const RankedList& b) {
  std::set<uint32_t> in_b;
  for (const ScoredIndex& x : b.items) in_b.insert(x.index);
  size_t hit = 0;
  for (const ScoredIndex& x : a.items) hit += in_b.count(x.index);
  return b.items.empty() ? 1.0 : static_cast<double>(hit) / b.items.size();
}

TEST(ApproxServing, RecommendRecallsTheExactAnswerAndKeepsGroupSharesOnATrainedModel) {
  const TrainedWorld& t = World();
  auto exact = Build(t, 0);
  auto approx = Build(t, 1);
  ASSERT_EQ(exact->dot_index(), nullptr);
  ASSERT_NE(approx->dot_index(), nullptr);
  std::vector<uint32_t> group_of;
  ASSERT_TRUE(popularity_groups(exact->item_degrees(), kGroups, &group_of).ok());

  Scorer scorer;
  RankedList e, a;
  double recall = 0;
  size_t answered_approximately = 0;
  std::vector<double> exact_slots(kGroups, 0), approx_slots(kGroups, 0);
  for (uint32_t u = 0; u < t.model.num_users(); ++u) {
    const std::string user = trainer::MemberLabel(u);
    RecommendQuery q;
    q.user_id = user;
    q.count = kCount;
    ASSERT_TRUE(scorer.Recommend(*exact, q, &e).ok());
    ASSERT_TRUE(scorer.Recommend(*approx, q, &a).ok());
    ASSERT_EQ(a.items.size(), e.items.size());
    recall += Overlap(a, e);
    answered_approximately += a.approximate;
    const auto seen = approx->seen_items(u);
    for (const ScoredIndex& x : a.items) {
      // Exclusions honoured: never an item the user has.
      ASSERT_FALSE(std::binary_search(seen.begin(), seen.end(), x.index)) << user;
      // Scores are exact dot products.
      double dot = 0;
      for (uint32_t d = 0; d < approx->dim(); ++d) {
        dot += double{approx->user_vector(u)[d]} * approx->item_vector(x.index)[d];
      }
      ASSERT_NEAR(x.score, dot, 1e-4 * (1 + std::abs(dot)));
      approx_slots[group_of[x.index]] += 1;
    }
    for (const ScoredIndex& x : e.items) exact_slots[group_of[x.index]] += 1;
    ASSERT_TRUE(std::is_sorted(a.items.begin(), a.items.end(), ranks_before));
  }
  const double users = t.model.num_users();
  recall /= users;
  std::printf("recall@20 vs exact %.4f; %zu of %.0f calls answered by the index\n", recall,
              answered_approximately, users);
  EXPECT_GE(recall, 0.95);
  EXPECT_GE(answered_approximately, 0.9 * users);
  // Every popularity group's share of the served slots within 10 % (relative) of exact's:
  // the index must not move exposure toward the head (or the tail).
  const double total = users * kCount;
  for (size_t g = 0; g < kGroups; ++g) {
    const double es = exact_slots[g] / total, as = approx_slots[g] / total;
    std::printf("group %zu (1 = tail): exact share %.4f, approximate %.4f\n", g + 1, es, as);
    if (es >= 0.02) {
      EXPECT_NEAR(as / es, 1.0, 0.10) << "group " << g + 1;
    }
  }
}

TEST(ApproxServing, SimilarItemsRecallsTheExactCosineAnswer) {
  const TrainedWorld& t = World();
  auto exact = Build(t, 0);
  auto approx = Build(t, 1);
  Scorer scorer;
  RankedList e, a;
  double recall = 0;
  uint32_t asked = 0;
  for (uint32_t i = 0; i < t.model.num_items(); i += 16, ++asked) {
    const std::string item = trainer::ToolLabel(i);
    SimilarQuery q;
    q.item_id = item;
    q.count = kCount;
    ASSERT_TRUE(scorer.SimilarItems(*exact, q, &e).ok());
    ASSERT_TRUE(scorer.SimilarItems(*approx, q, &a).ok());
    for (const ScoredIndex& x : a.items) ASSERT_NE(x.index, i);  // never the item itself
    recall += Overlap(a, e);
  }
  recall /= asked;
  std::printf("SimilarItems recall@20 vs exact over %u items: %.4f\n", asked, recall);
  EXPECT_GE(recall, 0.95);
}

TEST(ApproxServing, RequestExclusionsAreHonouredAndTooManyFallBackToTheExactScan) {
  const TrainedWorld& t = World();
  auto exact = Build(t, 0);
  auto approx = Build(t, 1, /*max_overfetch=*/50);
  Scorer scorer;
  RankedList e, a;
  const std::string user = trainer::MemberLabel(7);
  RecommendQuery q;
  q.user_id = user;
  q.count = kCount;
  ASSERT_TRUE(scorer.Recommend(*exact, q, &e).ok());
  // Exclude the exact answer's top ten: the approximate answer must not contain them.
  std::vector<std::string> ids;
  for (size_t j = 0; j < 10; ++j) ids.push_back(trainer::ToolLabel(e.items[j].index));
  std::vector<std::string_view> views(ids.begin(), ids.end());
  q.exclude_item_ids = views;
  ASSERT_TRUE(scorer.Recommend(*approx, q, &a).ok());
  ASSERT_EQ(a.items.size(), kCount);
  for (const ScoredIndex& x : a.items) {
    for (size_t j = 0; j < 10; ++j) ASSERT_NE(x.index, e.items[j].index);
  }
  // More exclusions than the over-fetch bound (seen items + 60 > 50): the exact scan answers,
  // and its answer is the exact one.
  std::vector<std::string> many;
  for (uint32_t i = 0; i < 60; ++i) many.push_back(trainer::ToolLabel(i * 3));
  std::vector<std::string_view> many_views(many.begin(), many.end());
  q.exclude_item_ids = many_views;
  ASSERT_TRUE(scorer.Recommend(*approx, q, &a).ok());
  EXPECT_FALSE(a.approximate);
  ASSERT_TRUE(scorer.Recommend(*exact, q, &e).ok());
  EXPECT_EQ(a.items, e.items);
}

// Withdrawn items (bitmap built for the snapshot, or resolved by id the instant after a swap)
// are never returned by the approximate path either, and it still answers from the index.
TEST(ApproxServing, WithdrawnItemsAreNeverReturned) {
  const TrainedWorld& t = World();
  auto approx = Build(t, 1);
  Scorer scorer;
  RankedList before, after;
  for (uint32_t u : {3u, 11u, 42u}) {
    RecommendQuery q;
    const std::string user = trainer::MemberLabel(u);
    q.user_id = user;
    q.count = kCount;
    ASSERT_TRUE(scorer.Recommend(*approx, q, &before).ok());
    ASSERT_TRUE(before.approximate);
    // Withdraw the first answer's top five.
    std::vector<std::string> ids;
    for (size_t j = 0; j < 5; ++j) ids.push_back(trainer::ToolLabel(before.items[j].index));
    for (const Snapshot* built_for : {approx.get(), static_cast<const Snapshot*>(nullptr)}) {
      WithdrawnItems withdrawn(ids, 1, built_for);
      q.withdrawn = &withdrawn;
      ASSERT_TRUE(scorer.Recommend(*approx, q, &after).ok());
      EXPECT_TRUE(after.approximate);
      ASSERT_EQ(after.items.size(), kCount);
      for (const ScoredIndex& x : after.items) {
        for (size_t j = 0; j < 5; ++j) ASSERT_NE(x.index, before.items[j].index) << user;
      }
      // The rest of the old answer moves up: its 15 others are all still there.
      for (size_t j = 5; j < kCount; ++j) {
        EXPECT_TRUE(std::any_of(after.items.begin(), after.items.end(),
                                [&](const ScoredIndex& x) { return x == before.items[j]; }));
      }
      SimilarQuery sq;
      const std::string item = trainer::ToolLabel(before.items[10].index);
      sq.item_id = item;
      sq.count = kCount;
      sq.withdrawn = &withdrawn;
      ASSERT_TRUE(scorer.SimilarItems(*approx, sq, &after).ok());
      for (const ScoredIndex& x : after.items) {
        for (size_t j = 0; j < 5; ++j) ASSERT_NE(x.index, before.items[j].index) << item;
      }
    }
  }
}

TEST(ApproxServing, SmallCataloguesStayExactAndBadOptionsAreRefused) {
  const TrainedWorld& t = World();
  auto snap = Build(t, t.model.num_items() + 1);  // threshold above the catalogue
  EXPECT_EQ(snap->dot_index(), nullptr);
  EXPECT_EQ(snap->cosine_index(), nullptr);
  std::unique_ptr<const ApproxIndex> index;
  ApproxIndexOptions bad;
  bad.links = 1;
  EXPECT_EQ(ApproxIndex::Build(snap->items(), ApproxIndex::Metric::kDot, bad, &index).code(),
            Status::Code::kInvalidArgument);
  EXPECT_EQ(ApproxIndex::Build(MatrixView{}, ApproxIndex::Metric::kDot, {}, &index).code(),
            Status::Code::kInvalidArgument);
}

// The inner-product reduction is exact: on a tiny matrix whose answer is known by hand the
// index finds it (rows chosen so that the largest dot product is not the nearest row in
// Euclidean distance, nor the longest row).
TEST(ApproxIndex, DotSearchFindsTheLargestInnerProductNotTheNearestRow) {
  // query q = (1, 0). Rows: (0.9, 0) dot 0.9 (nearest to q), (3, 2.9) dot 3 (the longest,
  // |x| = 4.17), (3.5, -0.5) dot 3.5 (the best), (-4, 0) dot -4.
  ItemMatrix m(4, 2);
  const float rows[] = {0.9f, 0.0f, 3.0f, 2.9f, 3.5f, -0.5f, -4.0f, 0.0f};
  std::copy(std::begin(rows), std::end(rows), m.data());
  std::unique_ptr<const ApproxIndex> index;
  ASSERT_TRUE(ApproxIndex::Build(m.view(), ApproxIndex::Metric::kDot, {}, &index).ok());
  std::vector<float> scratch;
  std::vector<uint32_t> found;
  const float q[] = {1.0f, 0.0f};
  index->Search(q, 1, 0, &scratch, &found);
  ASSERT_EQ(found.size(), 1u);
  EXPECT_EQ(found[0], 2u);
  found.clear();
  ASSERT_TRUE(ApproxIndex::Build(m.view(), ApproxIndex::Metric::kCosine, {}, &index).ok());
  index->Search(q, 2, 0, &scratch, &found);  // cosines 1, 0.72, 0.99, -1
  std::sort(found.begin(), found.end());
  EXPECT_EQ(found, (std::vector<uint32_t>{0, 2}));
}

}  // namespace
}  // namespace plumb::server
