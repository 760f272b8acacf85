#include "trainer/online/gate.h"

#include <cmath>
#include <limits>

#include <gtest/gtest.h>

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
  ASSERT_GE(s.users.size(), GateOptions{}.min_users) << "the other gate tests need a full sample";
  for (size_t n = 0; n < s.users.size(); ++n) {
    auto r = s.relevant[n];
    EXPECT_TRUE(std::is_sorted(r.begin(), r.end()));
  }
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
  GateVerdict v = JudgeCandidate(bad, trained_, BuildGateSample(*state_, 1000), state_->train(), {});
  EXPECT_EQ(v.outcome, store::GateOutcome::kFailed);
  EXPECT_NE(v.reason.find("non-finite"), std::string::npos);
}

TEST_F(GateTest, HugeNormFails) {
  trainer::Embeddings bad = *trained_;
  bad.user_row(0)[0] = 1e6f;
  GateVerdict v = JudgeCandidate(bad, trained_, BuildGateSample(*state_, 1000), state_->train(), {});
  EXPECT_EQ(v.outcome, store::GateOutcome::kFailed);
  EXPECT_NE(v.reason.find("row norm"), std::string::npos);
}

TEST_F(GateTest, CollapsedRecallFails) {
  // A candidate that has forgotten everything: fresh random rows.
  trainer::Embeddings fresh;
  ASSERT_TRUE(trainer::Embeddings::Create(16, trained_->num_users(), trained_->num_items(), 99,
                                          &fresh)
                  .ok());
  GateSample s = BuildGateSample(*state_, 1000);
  GateVerdict v = JudgeCandidate(fresh, trained_, s, state_->train(), {});
  std::printf("trained recall@20 %.4f, random recall@20 %.4f\n", v.active_recall,
              v.candidate_recall);
  ASSERT_GT(v.active_recall, v.candidate_recall + 0.02);
  EXPECT_EQ(v.outcome, store::GateOutcome::kFailed);
  EXPECT_NE(v.reason.find("below the active"), std::string::npos);
}

TEST_F(GateTest, TooSmallASampleIsNotCompared) {
  GateSample s = BuildGateSample(*state_, 10);  // ten users: below min_users
  trainer::Embeddings fresh;
  ASSERT_TRUE(trainer::Embeddings::Create(16, trained_->num_users(), trained_->num_items(), 99,
                                          &fresh)
                  .ok());
  GateVerdict v = JudgeCandidate(fresh, trained_, s, state_->train(), {});
  EXPECT_EQ(v.outcome, store::GateOutcome::kSkipped);
  EXPECT_NE(v.reason.find("fewer than"), std::string::npos) << v.reason;
}

TEST_F(GateTest, FirstVersionIsSkippedNotFailed) {
  GateVerdict v = JudgeCandidate(*trained_, nullptr, BuildGateSample(*state_, 1000),
                                 state_->train(), {});
  EXPECT_EQ(v.outcome, store::GateOutcome::kSkipped);
  EXPECT_TRUE(std::isnan(v.active_recall));
}

}  // namespace
}  // namespace plumb::online
