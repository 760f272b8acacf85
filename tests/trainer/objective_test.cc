// Objectives: the CPR cancellation property, analytic gradients against central finite
// differences, loss values against a double-precision transcription of the published
// formulas, numerically stable log-sigmoid, and the optimiser updates.
#include "trainer/objective.h"

#include <gtest/gtest.h>

#include <cmath>
#include <vector>

#include "tests/trainer/test_models.h"
#include "trainer/optimizer.h"

namespace plumb::trainer {
namespace {

using testing::RandomModel;

double DotD(const Embeddings& m, uint32_t u, uint32_t i) {
  double s = 0.0;
  for (uint32_t j = 0; j < m.dim(); ++j) {
    s += static_cast<double>(m.user_row(u)[j]) * static_cast<double>(m.item_row(i)[j]);
  }
  return s;
}

double LogSigmoidD(double x) { return -std::log1p(std::exp(-x)); }

Sample CprSample(std::vector<uint32_t> users, std::vector<uint32_t> items) {
  Sample s;
  s.k = static_cast<uint8_t>(users.size());
  for (size_t t = 0; t < users.size(); ++t) {
    s.users[t] = users[t];
    s.items[t] = items[t];
  }
  return s;
}

Sample NegSample(uint32_t u, uint32_t i, std::vector<uint32_t> negs) {
  Sample s;
  s.k = 1;
  s.users[0] = u;
  s.items[0] = i;
  s.num_negatives = static_cast<uint8_t>(negs.size());
  for (size_t n = 0; n < negs.size(); ++n) s.negatives[n] = negs[n];
  return s;
}

// CPR objective as published at The Web Conference 2022 (DESIGN.md section 2): every user
// and every item appears once on each side of the margin, so adding any a_u + b_i to every
// score leaves the margin unchanged (exact algebra; in double the difference is rounding).
TEST(CprObjective, MarginCancelsAdditiveUserAndItemTerms) {
  const Embeddings model = RandomModel(16, 40, 50, 11);
  Rng rng(5);
  for (int trial = 0; trial < 500; ++trial) {
    const uint32_t k = 2 + static_cast<uint32_t>(rng.Uniform(4));  // 2..5
    Sample s;
    s.k = static_cast<uint8_t>(k);
    // Distinct users and items by partial shuffles.
    std::vector<uint32_t> us(40), is(50);
    for (uint32_t n = 0; n < 40; ++n) us[n] = n;
    for (uint32_t n = 0; n < 50; ++n) is[n] = n;
    for (uint32_t t = 0; t < k; ++t) {
      std::swap(us[t], us[t + rng.Uniform(40 - t)]);
      std::swap(is[t], is[t + rng.Uniform(50 - t)]);
      s.users[t] = us[t];
      s.items[t] = is[t];
    }
    std::vector<double> a(40), b(50);
    for (double& x : a) x = 10.0 * rng.Normal();
    for (double& x : b) x = 10.0 * rng.Normal();
    auto plain = [&](uint32_t u, uint32_t i) { return DotD(model, u, i); };
    auto shifted = [&](uint32_t u, uint32_t i) { return DotD(model, u, i) + a[u] + b[i]; };
    const double m0 = CprMarginOf(s, plain);
    const double m1 = CprMarginOf(s, shifted);
    // Terms up to ~40 in magnitude: double rounding is ~1e-14.
    EXPECT_NEAR(m0, m1, 1e-12) << "k=" << k;
    // The objective's own float margin is the same quantity.
    CprObjective cpr;
    EXPECT_NEAR(cpr.Margin(model, s), m0, 1e-4);
  }
}

// Counter-check that the cancellation test can fail: BPR's margin s(u,i) - s(u,j) keeps
// the item terms b_i - b_j (Rendle et al. 2009 has no such invariance).
TEST(BprObjective, MarginKeepsItemTerms) {
  const Embeddings model = RandomModel(8, 4, 6, 3);
  BprObjective bpr;
  const Sample s = NegSample(1, 2, {5});
  const double b2 = 0.7, b5 = -0.4;
  const double m0 = DotD(model, 1, 2) - DotD(model, 1, 5);
  const double m1 = (DotD(model, 1, 2) + b2) - (DotD(model, 1, 5) + b5);
  EXPECT_NEAR(m1 - m0, b2 - b5, 1e-12);
  EXPECT_NEAR(bpr.Margin(model, s), m0, 1e-5);
}

// Loss values against double-precision transcriptions of the formulas.
TEST(Objectives, LossMatchesPublishedFormulas) {
  const Embeddings model = RandomModel(12, 10, 10, 21);
  RowGradients g;
  {
    // CPR k = 3: m = (1/3)(s11 + s22 + s33 - s12 - s23 - s31) with users 1,2,3 on items 4,5,6.
    const Sample s = CprSample({1, 2, 3}, {4, 5, 6});
    const double m = (DotD(model, 1, 4) + DotD(model, 2, 5) + DotD(model, 3, 6) -
                      DotD(model, 1, 5) - DotD(model, 2, 6) - DotD(model, 3, 4)) /
                     3.0;
    EXPECT_NEAR(CprObjective().LossAndGradient(model, s, &g), -LogSigmoidD(m), 1e-5);
  }
  {
    // BPR (Rendle et al. 2009): -ln sigma(s(u,i) - s(u,j)).
    const Sample s = NegSample(0, 3, {7});
    const double x = DotD(model, 0, 3) - DotD(model, 0, 7);
    EXPECT_NEAR(BprObjective().LossAndGradient(model, s, &g), -LogSigmoidD(x), 1e-5);
  }
  {
    // BCE with negatives: -ln sigma(s_ui) - sum_j ln sigma(-s_uj).
    const Sample s = NegSample(4, 1, {2, 8, 9});
    const double want = -LogSigmoidD(DotD(model, 4, 1)) - LogSigmoidD(-DotD(model, 4, 2)) -
                        LogSigmoidD(-DotD(model, 4, 8)) - LogSigmoidD(-DotD(model, 4, 9));
    EXPECT_NEAR(BceObjective().LossAndGradient(model, s, &g), want, 1e-5);
  }
}

// Central finite differences: dL/dx ~ (L(x + h) - L(x - h)) / (x+h - (x-h)), using the
// perturbation actually stored in float. The analytic gradient must agree on every
// coordinate of every touched row.
void CheckGradient(const Objective& obj, const Sample& s, Embeddings model) {
  RowGradients g;
  obj.LossAndGradient(model, s, &g);
  // Sum the parts of rows listed twice (BCE negatives drawn twice).
  struct Part {
    Side side;
    uint32_t row;
    std::vector<double> grad;
  };
  std::vector<Part> parts;
  for (uint32_t n = 0; n < g.count(); ++n) {
    Part* p = nullptr;
    for (Part& q : parts) {
      if (q.side == g.side(n) && q.row == g.row(n)) p = &q;
    }
    if (p == nullptr) {
      parts.push_back(Part{g.side(n), g.row(n), std::vector<double>(model.dim(), 0.0)});
      p = &parts.back();
    }
    for (uint32_t j = 0; j < model.dim(); ++j) p->grad[j] += g.grad(n)[j];
  }
  RowGradients scratch;
  for (const Part& p : parts) {
    for (uint32_t j = 0; j < model.dim(); ++j) {
      float* x = model.row(p.side, p.row) + j;
      const float x0 = *x;
      const float h = 1e-3f;
      *x = x0 + h;
      const float hi_x = *x;
      const double hi = obj.LossAndGradient(model, s, &scratch);
      *x = x0 - h;
      const float lo_x = *x;
      const double lo = obj.LossAndGradient(model, s, &scratch);
      *x = x0;
      const double fd = (hi - lo) / (static_cast<double>(hi_x) - static_cast<double>(lo_x));
      EXPECT_NEAR(p.grad[j], fd, 2e-3 + 1e-2 * std::fabs(fd))
          << "side " << int(p.side) << " row " << p.row << " coord " << j;
    }
  }
  // Rows not touched have no gradient: perturbing one leaves the loss unchanged.
  ASSERT_GT(model.num_users(), 0u);
}

TEST(CprObjective, GradientMatchesFiniteDifferencesK2) {
  CheckGradient(CprObjective(), CprSample({0, 3}, {2, 5}), RandomModel(8, 6, 7, 1));
}

TEST(CprObjective, GradientMatchesFiniteDifferencesK3) {
  CheckGradient(CprObjective(), CprSample({4, 1, 2}, {0, 6, 3}), RandomModel(8, 6, 7, 2));
}

TEST(CprObjective, GradientMatchesFiniteDifferencesK4) {
  CheckGradient(CprObjective(), CprSample({4, 1, 2, 0}, {0, 6, 3, 5}), RandomModel(6, 6, 7, 3));
}

TEST(BprObjective, GradientMatchesFiniteDifferences) {
  CheckGradient(BprObjective(), NegSample(2, 1, {4}), RandomModel(8, 5, 6, 4));
}

TEST(BceObjective, GradientMatchesFiniteDifferences) {
  CheckGradient(BceObjective(), NegSample(3, 0, {2, 5, 4}), RandomModel(8, 5, 6, 5));
  // A negative drawn twice: its two gradient parts add up.
  CheckGradient(BceObjective(), NegSample(1, 0, {2, 2}), RandomModel(8, 5, 6, 6));
}

// The CPR gradients of DESIGN.md written out for k = 2:
// dL/dp_{u1} = -(1 - sigma(m)) (q_{i1} - q_{i2}) / 2, dL/dq_{i1} = -(1 - sigma(m)) (p_{u1} -
// p_{u2}) / 2.
TEST(CprObjective, GradientMatchesDesignFormulaK2) {
  const Embeddings model = RandomModel(5, 3, 3, 8);
  const Sample s = CprSample({0, 2}, {1, 2});
  RowGradients g;
  CprObjective().LossAndGradient(model, s, &g);
  const double m =
      (DotD(model, 0, 1) + DotD(model, 2, 2) - DotD(model, 0, 2) - DotD(model, 2, 1)) / 2;
  const double dm = -(1.0 - 1.0 / (1.0 + std::exp(-m)));
  ASSERT_EQ(g.count(), 4u);
  for (uint32_t j = 0; j < 5; ++j) {
    EXPECT_NEAR(g.grad(0)[j], dm * (model.item_row(1)[j] - model.item_row(2)[j]) / 2, 1e-6);
    EXPECT_NEAR(g.grad(2)[j], dm * (model.user_row(0)[j] - model.user_row(2)[j]) / 2, 1e-6);
  }
  EXPECT_EQ(g.side(0), Side::kUser);
  EXPECT_EQ(g.row(0), 0u);
  EXPECT_EQ(g.side(2), Side::kItem);
  EXPECT_EQ(g.row(2), 1u);
}

TEST(LogSigmoid, StableAndAccurate) {
  for (double x : {-30.0, -5.0, -1.0, -1e-3, 0.0, 1e-3, 0.5, 3.0, 15.0}) {
    EXPECT_NEAR(LogSigmoid(static_cast<float>(x)), LogSigmoidD(x), 1e-6 * (1 + std::fabs(x)));
    EXPECT_NEAR(Sigmoid(static_cast<float>(x)), 1.0 / (1.0 + std::exp(-x)), 1e-7);
  }
  // Far tails: no overflow, no NaN, the asymptotes ln sigma(x) ~ x (x -> -inf) and ~ -e^{-x}.
  EXPECT_FLOAT_EQ(LogSigmoid(-1000.0f), -1000.0f);
  EXPECT_EQ(LogSigmoid(1000.0f), 0.0f);
  EXPECT_NEAR(LogSigmoid(20.0f), -std::exp(-20.0), 1e-12);
  EXPECT_EQ(Sigmoid(-1000.0f), 0.0f);
  EXPECT_EQ(Sigmoid(1000.0f), 1.0f);
  EXPECT_TRUE(std::isfinite(-LogSigmoid(-1e30f)));
}

// SGD step: row' = row - lr (grad + l2 row), computed from the parameters before the step.
TEST(Objective, SgdStepAppliesGradientAndL2ToTouchedRowsOnly) {
  Embeddings model = RandomModel(6, 4, 5, 9);
  const Embeddings before = model;
  const Sample s = CprSample({1, 3}, {0, 4});
  RowGradients g;
  CprObjective cpr;
  cpr.LossAndGradient(before, s, &g);
  std::vector<std::vector<float>> grads;
  for (uint32_t n = 0; n < g.count(); ++n) grads.emplace_back(g.grad(n), g.grad(n) + 6);
  SgdOptimizer sgd(0.1f);
  const float l2 = 0.01f;
  const float loss = cpr.Step(&model, &sgd, s, l2, &g);
  EXPECT_NEAR(loss, -LogSigmoidD(cpr.Margin(before, s)), 1e-6);
  for (uint32_t n = 0; n < 4; ++n) {
    const Side side = n < 2 ? Side::kUser : Side::kItem;
    const uint32_t row = n < 2 ? s.users[n] : s.items[n - 2];
    for (uint32_t j = 0; j < 6; ++j) {
      const float old = before.row(side, row)[j];
      EXPECT_NEAR(model.row(side, row)[j], old - 0.1f * (grads[n][j] + l2 * old), 1e-7);
    }
  }
  // Untouched rows unchanged bit for bit.
  EXPECT_EQ(model.users().row(0), before.users().row(0));
  EXPECT_EQ(model.users().row(2), before.users().row(2));
  EXPECT_EQ(model.items().row(1), before.items().row(1));
}

// Adagrad (Duchi et al. 2011): G += g^2, x -= lr g / sqrt(G), G starting at 0.1.
TEST(Optimizer, AdagradPerCoordinateAndPerRow) {
  Embeddings model = RandomModel(4, 2, 2, 1);
  AdagradOptimizer ada(0.5f);
  ASSERT_TRUE(ada.Resize(model).ok());
  const float g[4] = {1.0f, -2.0f, 0.0f, 0.5f};
  float row[4] = {1, 1, 1, 1};
  ada.Apply(Side::kItem, 1, row, g, 4);
  ada.Apply(Side::kItem, 1, row, g, 4);
  for (int j = 0; j < 4; ++j) {
    const double a1 = 0.1 + g[j] * g[j], a2 = a1 + g[j] * g[j];
    const double want = 1.0 - 0.5 * g[j] / std::sqrt(a1) - 0.5 * g[j] / std::sqrt(a2);
    EXPECT_NEAR(row[j], want, 1e-6);
    EXPECT_NEAR(ada.accumulator(Side::kItem, 1, j), a2, 1e-6);
  }
  EXPECT_FLOAT_EQ(ada.accumulator(Side::kUser, 1, 0), 0.1f);  // other rows untouched

  AdagradOptimizer per_row(0.5f, /*per_row=*/true);
  ASSERT_TRUE(per_row.Resize(model).ok());
  float row2[4] = {1, 1, 1, 1};
  per_row.Apply(Side::kUser, 0, row2, g, 4);
  const double acc = 0.1 + (1.0 + 4.0 + 0.0 + 0.25) / 4.0;
  for (int j = 0; j < 4; ++j) EXPECT_NEAR(row2[j], 1.0 - 0.5 * g[j] / std::sqrt(acc), 1e-6);

  // Growing keeps existing accumulators.
  ASSERT_TRUE(model.Grow(5, 5).ok());
  ASSERT_TRUE(ada.Resize(model).ok());
  EXPECT_NEAR(ada.accumulator(Side::kItem, 1, 1), 0.1 + 8.0, 1e-5);
  EXPECT_FLOAT_EQ(ada.accumulator(Side::kItem, 4, 3), 0.1f);
}

TEST(Objective, ParseNames) {
  ObjectiveKind k;
  ASSERT_TRUE(ParseObjectiveKind("bce", &k).ok());
  EXPECT_EQ(k, ObjectiveKind::kBce);
  const Status bad = ParseObjectiveKind("wrap", &k);
  EXPECT_EQ(bad.code(), Status::Code::kInvalidArgument);
  EXPECT_NE(bad.message().find("cpr"), std::string::npos);
  OptimizerKind o;
  ASSERT_TRUE(ParseOptimizerKind("sgd", &o).ok());
  EXPECT_EQ(o, OptimizerKind::kSgd);
  EXPECT_FALSE(ParseOptimizerKind("adam", &o).ok());
}

}  // namespace
}  // namespace plumb::trainer
