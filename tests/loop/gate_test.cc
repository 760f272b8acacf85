#include "trainer/online/gate.h"

#include <gtest/gtest.h>

#include <algorithm>
#include <cmath>
#include <limits>

#include "trainer/online/training_state.h"
#include "trainer/synth.h"
#include "trainer/trainer.h"

namespace plumb::online {
namespace {

// A small world, its events folded into a TrainingState with 20% held out, and a model
// trained on it: the "active" version the gate compares candidates with.
class GateTest : public ::testing::Test {
 protected:
  static void SetUpTestSuite() {
    trainer::SynthOptions w;
    w.users = 600;
    w.items = 300;
    w.target_interactions = 20000;
    w.seed = 11;
    trainer::SynthWorld world;
    ASSERT_TRUE(trainer::GenerateSynthWorld(w, &world).ok());
    state_ = new TrainingState(0.2);
    uint64_t seq = 0;
    for (const auto& e : world.events) {
      store::Event ev;
      ev.seq = ++seq;
      ev.user_id = trainer::MemberLabel(e.user);
      ev.item_id = trainer::ToolLabel(e.item);
      ASSERT_TRUE(state_->Apply(ev, nullptr).ok());
    }
    trained_ = new trainer::Embeddings();
    ASSERT_TRUE(trainer::Embeddings::Create(16, state_->train().num_users(),
                                            state_->train().num_items(), 1, trained_)
                    .ok());
    trainer::TrainOptions t;
    t.objective = trainer::ObjectiveKind::kBpr;
    t.beta = 1.0;
    std::unique_ptr<trainer::FitLoop> fit;
    ASSERT_TRUE(trainer::FitLoop::Create(t, trained_, &state_->train(), &fit).ok());
    ASSERT_TRUE(fit->RunEpochs(15).ok());
  }
  static void TearDownTestSuite() {
    delete state_;
    delete trained_;
  }
  static TrainingState* state_;
  static trainer::Embeddings* trained_;
};
TrainingState* GateTest::state_ = nullptr;
trainer::Embeddings* GateTest::trained_ = nullptr;

TEST_F(GateTest, SampleIsNonEmptyAndSorted) {
  GateSample s = BuildGateSample(*state_, 1000);
  ASSERT_GE(s.effective_pairs, GateOptions{}.min_effective_pairs)
      << "the other gate tests need a full sample";
  size_t pairs = 0;
  for (size_t n = 0; n < s.users.size(); ++n) {
    auto r = s.relevant[n];
    EXPECT_TRUE(std::is_sorted(r.begin(), r.end()));
    pairs += r.size();
  }
  EXPECT_EQ(s.weights.size(), pairs);
  // Every held-out pair of a user with training pairs is used: none is re-sampled away.
  size_t usable = 0;
  for (const trainer::Pair& p : state_->validation()) {
    if (state_->train().user_degree(p.user) > 0) ++usable;
  }
  EXPECT_EQ(pairs, usable);
}

// Weighted recall and the Kish effective sample size on a hand-worked sample: weights
// 1, 1/2, 1/4, 1/4 (items of degree 1, 2, 4, 4); hits on the first and third pair.
// Recall = (1 + 1/4) / (1 + 1/2 + 1/4 + 1/4) = 1.25 / 2 = 0.625.
// Kish (1965) effective size = (sum w)^2 / sum w^2 = 4 / (1 + 1/4 + 1/16 + 1/16) = 2.909...
TEST(GateMath, WeightedRecallAndEffectiveSizeByHand) {
  GateSample s;
  s.users = {0, 1};
  const uint32_t a[] = {1, 2};
  const uint32_t b[] = {3, 4};
  s.relevant.Append(a);
  s.relevant.Append(b);
  s.weights = {1.0, 0.5, 0.25, 0.25};
  const uint8_t hits[] = {1, 0, 1, 0};
  EXPECT_DOUBLE_EQ(trainer::WeightedRecall(s, hits), 0.625);
  const double sum = 2.0, sum_sq = 1.0 + 0.25 + 0.0625 + 0.0625;
  EXPECT_NEAR(sum * sum / sum_sq, 2.909090909, 1e-8);
}

TEST_F(GateTest, WeightsAreInversePopularity) {
  GateSample s = BuildGateSample(*state_, 1000);
  size_t p = 0;
  double sum = 0.0, sum_sq = 0.0;
  for (size_t n = 0; n < s.users.size(); ++n) {
    for (uint32_t i : s.relevant[n]) {
      const double want = 1.0 / std::max<uint32_t>(1, state_->train().item_degree(i));
      EXPECT_DOUBLE_EQ(s.weights[p++], want);
      sum += want;
      sum_sq += want * want;
    }
  }
  EXPECT_NEAR(s.effective_pairs, sum * sum / sum_sq, 1e-9);
}

TEST_F(GateTest, SameModelPasses) {
  GateSample s = BuildGateSample(*state_, 1000);
  GateVerdict v = JudgeCandidate(*trained_, trained_, s, state_->train(), {});
  EXPECT_EQ(v.outcome, store::GateOutcome::kPassed) << v.reason;
  EXPECT_DOUBLE_EQ(v.candidate_recall, v.active_recall);
}

TEST_F(GateTest, NanRowFails) {
  trainer::Embeddings bad = *trained_;
  bad.item_row(3)[0] = std::numeric_limits<float>::quiet_NaN();
  GateVerdict v =
      JudgeCandidate(bad, trained_, BuildGateSample(*state_, 1000), state_->train(), {});
  EXPECT_EQ(v.outcome, store::GateOutcome::kFailed);
  EXPECT_NE(v.reason.find("non-finite"), std::string::npos);
}

TEST_F(GateTest, HugeNormFails) {
  trainer::Embeddings bad = *trained_;
  bad.user_row(0)[0] = 1e6f;
  GateVerdict v =
      JudgeCandidate(bad, trained_, BuildGateSample(*state_, 1000), state_->train(), {});
  EXPECT_EQ(v.outcome, store::GateOutcome::kFailed);
  EXPECT_NE(v.reason.find("row norm"), std::string::npos);
}

TEST_F(GateTest, CollapsedRecallFails) {
  // A candidate that has forgotten everything: fresh random rows.
  trainer::Embeddings fresh;
  ASSERT_TRUE(
      trainer::Embeddings::Create(16, trained_->num_users(), trained_->num_items(), 99, &fresh)
          .ok());
  GateSample s = BuildGateSample(*state_, 1000);
  GateVerdict v = JudgeCandidate(fresh, trained_, s, state_->train(), {});
  std::printf("trained recall@20 %.4f, random recall@20 %.4f\n", v.active_recall,
              v.candidate_recall);
  ASSERT_GT(v.active_recall, v.candidate_recall + 0.02);
  EXPECT_EQ(v.outcome, store::GateOutcome::kFailed);
  EXPECT_NE(v.reason.find("below the active"), std::string::npos);
  EXPECT_GT(v.standard_error, 0.0);
}

// A candidate that differs from the active version by noise only (a few rows nudged) is not
// failed, even with a zero tolerance: the drop must exceed two standard errors.
TEST_F(GateTest, NoiseSizedDifferenceDoesNotFail) {
  trainer::Embeddings nudged = *trained_;
  for (uint32_t u = 0; u < 20; ++u) nudged.user_row(u)[0] += 0.05f;
  GateOptions o;
  o.tolerance = 0.0;
  GateVerdict v =
      JudgeCandidate(nudged, trained_, BuildGateSample(*state_, 1000), state_->train(), o);
  EXPECT_EQ(v.outcome, store::GateOutcome::kPassed) << v.reason;
  EXPECT_LE(std::abs(v.candidate_recall - v.active_recall), 2.0 * v.standard_error + 1e-12);
}

TEST_F(GateTest, TooSmallASampleIsNotCompared) {
  GateSample s = BuildGateSample(*state_, 2);  // two users: a tiny effective size
  ASSERT_LT(s.effective_pairs, GateOptions{}.min_effective_pairs);
  trainer::Embeddings fresh;
  ASSERT_TRUE(
      trainer::Embeddings::Create(16, trained_->num_users(), trained_->num_items(), 99, &fresh)
          .ok());
  GateVerdict v = JudgeCandidate(fresh, trained_, s, state_->train(), {});
  EXPECT_EQ(v.outcome, store::GateOutcome::kSkipped);
  EXPECT_NE(v.reason.find("fewer than"), std::string::npos) << v.reason;
}

TEST_F(GateTest, FirstVersionIsSkippedNotFailed) {
  GateVerdict v =
      JudgeCandidate(*trained_, nullptr, BuildGateSample(*state_, 1000), state_->train(), {});
  EXPECT_EQ(v.outcome, store::GateOutcome::kSkipped);
  EXPECT_TRUE(std::isnan(v.active_recall));
}

}  // namespace
}  // namespace plumb::online
