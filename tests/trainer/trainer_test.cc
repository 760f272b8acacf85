#include "trainer/trainer.h"

#include <gtest/gtest.h>

#include <vector>

#include "tests/trainer/test_models.h"

namespace plumb::trainer {
namespace {

using testing::RandomData;

TrainOptions Options(ObjectiveKind kind, double beta = 3.0) {
  TrainOptions o;
  o.objective = kind;
  o.beta = beta;
  o.batch_size = 64;
  o.seed = 99;
  return o;
}

Embeddings Train(const TrainOptions& o, const Interactions& data, uint32_t epochs) {
  Embeddings m;
  EXPECT_TRUE(Embeddings::Create(16, data.num_users(), data.num_items(), 5, &m).ok());
  std::unique_ptr<FitLoop> loop;
  EXPECT_TRUE(FitLoop::Create(o, &m, &data, &loop).ok());
  EXPECT_TRUE(loop->RunEpochs(epochs).ok());
  return m;
}

TEST(FitLoop, OneThreadWithFixedSeedIsBitIdentical) {
  const Interactions data = RandomData(120, 90, 0.05, 1);
  for (ObjectiveKind kind : {ObjectiveKind::kCpr, ObjectiveKind::kBpr, ObjectiveKind::kBce}) {
    TrainOptions o = Options(kind);
    o.cpr_mix_share = 0.25;  // mixed k must be deterministic too
    const Embeddings a = Train(o, data, 3);
    const Embeddings b = Train(o, data, 3);
    EXPECT_TRUE(a.users() == b.users()) << ObjectiveName(kind);
    EXPECT_TRUE(a.items() == b.items()) << ObjectiveName(kind);
    o.seed = 100;
    const Embeddings c = Train(o, data, 3);
    EXPECT_FALSE(a.users() == c.users()) << ObjectiveName(kind);
  }
}

TEST(FitLoop, EpochsUseAllPairsAndLossFalls) {
  const Interactions data = RandomData(200, 150, 0.04, 2);
  for (ObjectiveKind kind : {ObjectiveKind::kCpr, ObjectiveKind::kBpr, ObjectiveKind::kBce}) {
    Embeddings m;
    ASSERT_TRUE(Embeddings::Create(16, 200, 150, 1, &m).ok());
    TrainOptions o = Options(kind, 1.0);  // beta 1 so the loss is not of ever-harder samples
    o.learning_rate = 0.1f;
    std::unique_ptr<FitLoop> loop;
    ASSERT_TRUE(FitLoop::Create(o, &m, &data, &loop).ok());
    std::vector<FitProgress> seen;
    ASSERT_TRUE(loop->RunEpochs(8,
                                [&](const FitProgress& p) {
                                  seen.push_back(p);
                                  return true;
                                })
                    .ok());
    ASSERT_EQ(seen.size(), 8u);
    for (uint32_t e = 0; e < 8; ++e) {
      EXPECT_EQ(seen[e].epoch, e + 1);
      EXPECT_EQ(seen[e].epochs, 8u);
      // An epoch uses as many positives as there are pairs, give or take one sample.
      EXPECT_GE(seen[e].positives, data.size());
      EXPECT_LE(seen[e].positives, data.size() + kMaxSampleSlots);
      EXPECT_GT(seen[e].positives_per_second, 0.0);
    }
    EXPECT_LT(seen.back().mean_loss, 0.9 * seen.front().mean_loss) << ObjectiveName(kind);
    EXPECT_TRUE(m.AllFinite());
  }
}

TEST(FitLoop, CallbackCanStopEarly) {
  const Interactions data = RandomData(50, 40, 0.1, 3);
  Embeddings m;
  ASSERT_TRUE(Embeddings::Create(8, 50, 40, 1, &m).ok());
  std::unique_ptr<FitLoop> loop;
  ASSERT_TRUE(FitLoop::Create(Options(ObjectiveKind::kCpr), &m, &data, &loop).ok());
  int calls = 0;
  ASSERT_TRUE(loop->RunEpochs(10, [&](const FitProgress&) { return ++calls < 2; }).ok());
  EXPECT_EQ(calls, 2);
}

TEST(FitLoop, TwoThreadsTrainAndRunBatchesCountsSamples) {
  const Interactions data = RandomData(300, 200, 0.03, 4);
  Embeddings m;
  ASSERT_TRUE(Embeddings::Create(16, 300, 200, 1, &m).ok());
  TrainOptions o = Options(ObjectiveKind::kCpr);
  o.threads = 2;
  std::unique_ptr<FitLoop> loop;
  ASSERT_TRUE(FitLoop::Create(o, &m, &data, &loop).ok());
  std::vector<double> losses;
  ASSERT_TRUE(loop->RunEpochs(4,
                              [&](const FitProgress& p) {
                                losses.push_back(p.mean_loss);
                                EXPECT_GE(p.positives, data.size());
                                return true;
                              })
                  .ok());
  EXPECT_TRUE(m.AllFinite());
  FitProgress last;
  ASSERT_TRUE(loop->RunBatches(7,
                               [&](const FitProgress& p) {
                                 last = p;
                                 return true;
                               })
                  .ok());
  EXPECT_EQ(last.samples, 7u * 64u);
  EXPECT_EQ(last.positives, 7u * 64u * 2u);
}

TEST(FitLoop, StepBatchTrainsNewPairsAndGrowsTheModel) {
  Interactions data = RandomData(40, 30, 0.1, 5);
  Embeddings m;
  ASSERT_TRUE(Embeddings::Create(8, 40, 30, 1, &m).ok());
  std::unique_ptr<FitLoop> loop;
  ASSERT_TRUE(FitLoop::Create(Options(ObjectiveKind::kCpr), &m, &data, &loop).ok());
  ASSERT_TRUE(loop->RunEpochs(1).ok());
  // New user 45 and new item 33 arrive online.
  std::vector<uint64_t> fresh;
  ASSERT_TRUE(data.AddAll(std::vector<Pair>{{45, 33}, {45, 2}, {3, 33}}, &fresh).ok());
  ASSERT_EQ(fresh.size(), 3u);
  const Embeddings before = m;
  StepStats st;
  ASSERT_TRUE(loop->StepBatch(fresh, 20, &st).ok());
  EXPECT_EQ(m.num_users(), 46u);
  EXPECT_EQ(m.num_items(), 34u);
  EXPECT_EQ(st.samples, 23u);
  EXPECT_EQ(st.positives, 46u);
  EXPECT_GT(st.mean_loss, 0.0);
  // The new user's row was initialised and then trained (it is in an anchored sample).
  Embeddings fresh_init;
  ASSERT_TRUE(Embeddings::Create(8, 46, 34, 1, &fresh_init).ok());
  EXPECT_FALSE(m.users().row(45) == fresh_init.users().row(45));
  // Rows nobody touched keep their values (user 44 has no interactions at all).
  EXPECT_TRUE(m.users().row(44) == fresh_init.users().row(44));
  // A bad index is rejected before anything changes.
  const Embeddings snapshot = m;
  const std::vector<uint64_t> bad{data.size()};
  EXPECT_EQ(loop->StepBatch(bad, 5).code(), Status::Code::kInvalidArgument);
  EXPECT_TRUE(m.users() == snapshot.users());
  EXPECT_TRUE(m.items() == snapshot.items());
  (void)before;
}

TEST(FitLoop, DataThatCannotFormSamplesFailsFastWithoutUpdates) {
  std::vector<Pair> all;
  for (uint32_t u = 0; u < 20; ++u) {
    for (uint32_t i = 0; i < 20; ++i) all.push_back(Pair{u, i});
  }
  Interactions dense;
  ASSERT_TRUE(Interactions::Build(all, 20, 20, &dense).ok());
  Embeddings m;
  ASSERT_TRUE(Embeddings::Create(8, 20, 20, 1, &m).ok());
  const Embeddings before = m;
  std::unique_ptr<FitLoop> loop;
  ASSERT_TRUE(FitLoop::Create(Options(ObjectiveKind::kCpr), &m, &dense, &loop).ok());
  EXPECT_EQ(loop->RunEpochs(3).code(), Status::Code::kResourceExhausted);
  EXPECT_TRUE(m.users() == before.users());
  // BPR on the same data: every user has every item, so no negative exists.
  std::unique_ptr<FitLoop> bpr;
  ASSERT_TRUE(FitLoop::Create(Options(ObjectiveKind::kBpr), &m, &dense, &bpr).ok());
  EXPECT_EQ(bpr->RunEpochs(1).code(), Status::Code::kFailedPrecondition);

  Interactions one_user;
  ASSERT_TRUE(one_user.AddAll(std::vector<Pair>{{0, 0}, {0, 1}, {0, 2}}).ok());
  std::unique_ptr<FitLoop> cpr;
  ASSERT_TRUE(FitLoop::Create(Options(ObjectiveKind::kCpr), &m, &one_user, &cpr).ok());
  EXPECT_EQ(cpr->RunEpochs(1).code(), Status::Code::kFailedPrecondition);
  EXPECT_EQ(cpr->StepBatch(std::vector<uint64_t>{0}, 0).code(), Status::Code::kFailedPrecondition);
}

TEST(FitLoop, RejectsBadOptions) {
  Interactions data;
  Embeddings m;
  ASSERT_TRUE(Embeddings::Create(8, 1, 1, 1, &m).ok());
  std::unique_ptr<FitLoop> loop;
  TrainOptions o;
  o.beta = 0.5;
  EXPECT_EQ(FitLoop::Create(o, &m, &data, &loop).code(), Status::Code::kInvalidArgument);
  o = TrainOptions{};
  o.learning_rate = -1.0f;
  EXPECT_EQ(FitLoop::Create(o, &m, &data, &loop).code(), Status::Code::kInvalidArgument);
  o = TrainOptions{};
  o.threads = 0;
  EXPECT_EQ(FitLoop::Create(o, &m, &data, &loop).code(), Status::Code::kInvalidArgument);
  o = TrainOptions{};
  o.cpr_k = 9;
  EXPECT_EQ(FitLoop::Create(o, &m, &data, &loop).code(), Status::Code::kInvalidArgument);
  Embeddings none;
  EXPECT_EQ(FitLoop::Create(TrainOptions{}, &none, &data, &loop).code(),
            Status::Code::kInvalidArgument);
}

}  // namespace
}  // namespace plumb::trainer
