// The tuner: its choice rule on hand-worked samples whose answer is known, and Tune end to end
// on a small synthetic world (the returned model is the chosen row's).
#include "trainer/tuner.h"

#include <gtest/gtest.h>

#include <cmath>
#include <vector>

#include "trainer/synth.h"

namespace plumb::trainer {
namespace {

// Four validation pairs of weight 1 (two users, two pairs each).
ValidationSample FourPairs() {
  ValidationSample s;
  s.users = {0, 1};
  const uint32_t a[] = {1, 2}, b[] = {3, 4};
  s.relevant.Append(a);
  s.relevant.Append(b);
  s.weights = {1, 1, 1, 1};
  s.effective_pairs = 4.0;  // Kish: (sum w)^2 / sum w^2 = 16 / 4
  return s;
}

TuneRow Row(double beta, std::vector<uint8_t> hits, double distance) {
  TuneRow r;
  r.candidate.beta = beta;
  r.scores.hits = std::move(hits);
  double h = 0;
  for (uint8_t x : r.scores.hits) h += x;
  r.scores.recall = h / static_cast<double>(r.scores.hits.size());
  r.scores.shift.distance = distance;
  return r;
}

// Hand-worked: A hits 3 of 4 (recall 0.75), B hits 2 of 4 (0.5), B's shares are closer to the
// validation split's (distance 0.1 vs 0.3). Paired differences A - B: (0, 0, 1, 0), mean 0.25,
// weighted variance ((3 x 0.25^2) + 0.75^2) / 4 = 0.1875, standard error sqrt(0.1875 / 4) =
// 0.2165. The gap 0.25 is within two standard errors (0.433) but not within one (0.2165).
TEST(TunerChoice, NearTieGoesToTheCloserSharesAndAClearWinnerStays) {
  const ValidationSample s = FourPairs();
  std::vector<TuneRow> rows = {Row(1, {1, 1, 1, 0}, 0.3), Row(3, {1, 1, 0, 0}, 0.1)};
  std::string reason;
  EXPECT_EQ(ChooseCandidate(s, 2.0, &rows, &reason), 1u) << reason;
  EXPECT_NEAR(rows[1].standard_error, std::sqrt(0.1875 / 4.0), 1e-12);
  EXPECT_TRUE(rows[1].near_tie);
  EXPECT_TRUE(rows[1].chosen);
  EXPECT_FALSE(rows[0].chosen);
  EXPECT_NE(reason.find("closer"), std::string::npos) << reason;

  EXPECT_EQ(ChooseCandidate(s, 1.0, &rows, &reason), 0u) << reason;
  EXPECT_FALSE(rows[1].near_tie);
  EXPECT_TRUE(rows[0].chosen);
  EXPECT_NE(reason.find("best debiased validation recall"), std::string::npos) << reason;
}

// A planted answer: the candidate with identical hits and the smallest distance wins any tie;
// a candidate that misses everything is never a near-tie of one that hits everything.
TEST(TunerChoice, IdenticalRecallPrefersTheSmallestDistance) {
  const ValidationSample s = FourPairs();
  std::vector<TuneRow> rows = {Row(1, {1, 0, 1, 0}, 0.4), Row(2, {1, 0, 1, 0}, 0.05),
                               Row(5, {1, 0, 1, 0}, 0.2)};
  EXPECT_EQ(ChooseCandidate(s, 2.0, &rows, nullptr), 1u);
  std::vector<TuneRow> clear = {Row(1, {0, 0, 0, 0}, 0.0), Row(3, {1, 1, 1, 1}, 0.9)};
  EXPECT_EQ(ChooseCandidate(s, 2.0, &clear, nullptr), 1u);
  EXPECT_FALSE(clear[0].near_tie);
}

// End to end on a small world: every candidate is scored, the chosen one is a near-tie of the
// best, and the returned model is the chosen candidate's (its validation recall matches).
TEST(Tuner, TuneReturnsTheChosenModel) {
  SynthOptions w;
  w.users = 800;
  w.items = 400;
  w.target_interactions = 24000;
  w.seed = 3;
  SynthWorld world;
  ASSERT_TRUE(GenerateSynthWorld(w, &world).ok());
  std::vector<Pair> kept, held;
  for (size_t n = 0; n < world.events.size(); ++n) {
    const Pair p{world.events[n].user, world.events[n].item};
    (n % 10 == 0 ? held : kept).push_back(p);
  }
  Interactions train;
  ASSERT_TRUE(Interactions::Build(kept, w.users, w.items, &train).ok());
  const ValidationSample sample = BuildValidationSample(train, held, 100000);
  ASSERT_GT(sample.effective_pairs, 30.0);
  TrainOptions base;
  base.threads = 1;
  TuneOptions o;
  o.dim = 16;
  o.epochs = 8;
  const std::vector<TuneCandidate> candidates = {{1.0, 0.0}, {3.0, 0.0}};
  int seen = 0;
  TuneResult r;
  ASSERT_TRUE(Tune(
                  train, sample, base, candidates, o,
                  [&](const TuneRow&, const Embeddings& m) {
                    EXPECT_EQ(m.dim(), 16u);
                    return ++seen > 0;
                  },
                  &r)
                  .ok());
  EXPECT_EQ(seen, 2);
  ASSERT_EQ(r.report.rows.size(), 2u);
  const TuneRow& chosen = r.report.rows[r.report.chosen];
  EXPECT_TRUE(chosen.chosen);
  EXPECT_TRUE(chosen.near_tie);
  EXPECT_FALSE(r.report.reason.empty());
  ASSERT_EQ(r.report.target_group_shares.size(), 5u);
  ValidationScores again;
  ASSERT_TRUE(ScoreOnValidation(sample, r.model, train, o.k, o.groups, &again).ok());
  EXPECT_DOUBLE_EQ(again.recall, chosen.scores.recall);
  ASSERT_NE(r.optimizer, nullptr);
  // The validation figures of the better candidate beat a model that learned nothing.
  Embeddings untrained;
  ASSERT_TRUE(Embeddings::Create(16, train.num_users(), train.num_items(), 99, &untrained).ok());
  ValidationScores none;
  ASSERT_TRUE(ScoreOnValidation(sample, untrained, train, o.k, o.groups, &none).ok());
  EXPECT_GT(chosen.scores.recall, none.recall + 0.02);
}

TEST(Tuner, RejectsNoCandidatesAndAnEmptySample) {
  Interactions train;
  ASSERT_TRUE(Interactions::Build(std::vector<Pair>{{0, 0}, {1, 1}}, 2, 2, &train).ok());
  TuneResult r;
  EXPECT_EQ(Tune(train, FourPairs(), TrainOptions(), {}, TuneOptions(), {}, &r).code(),
            Status::Code::kInvalidArgument);
  const std::vector<TuneCandidate> one = {{1.0, 0.0}};
  EXPECT_EQ(Tune(train, ValidationSample(), TrainOptions(), one, TuneOptions(), {}, &r).code(),
            Status::Code::kFailedPrecondition);
}

}  // namespace
}  // namespace plumb::trainer
