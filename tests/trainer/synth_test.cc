#include "trainer/synth.h"

#include <gtest/gtest.h>
#include <unistd.h>

#include <algorithm>
#include <cmath>
#include <filesystem>
#include <fstream>
#include <functional>
#include <set>
#include <string>
#include <vector>

namespace plumb::trainer {
namespace {

SynthOptions Small() {
  SynthOptions o;
  o.users = 300;
  o.items = 400;
  o.target_interactions = 8000;
  o.seed = 17;
  return o;
}

TEST(Synth, DeterministicPerSeed) {
  SynthWorld a, b, c;
  ASSERT_TRUE(GenerateSynthWorld(Small(), &a).ok());
  ASSERT_TRUE(GenerateSynthWorld(Small(), &b).ok());
  SynthOptions other = Small();
  other.seed = 18;
  ASSERT_TRUE(GenerateSynthWorld(other, &c).ok());
  ASSERT_EQ(a.events.size(), b.events.size());
  for (size_t n = 0; n < a.events.size(); ++n) {
    EXPECT_EQ(a.events[n].user, b.events[n].user);
    EXPECT_EQ(a.events[n].item, b.events[n].item);
    EXPECT_EQ(a.events[n].ts_ms, b.events[n].ts_ms);
  }
  EXPECT_EQ(a.test, b.test);
  EXPECT_EQ(a.item_names, b.item_names);
  EXPECT_NE(a.events.size(), c.events.size());
}

TEST(Synth, OutputsAreWellFormed) {
  SynthWorld w;
  const SynthOptions o = Small();
  ASSERT_TRUE(GenerateSynthWorld(o, &w).ok());
  // The calibrated exposure scale hits the target within Monte Carlo and Poisson noise.
  EXPECT_NEAR(static_cast<double>(w.events.size()), 8000.0, 800.0);
  std::set<std::pair<uint32_t, uint32_t>> observed;
  for (size_t n = 0; n < w.events.size(); ++n) {
    const SynthEvent& e = w.events[n];
    ASSERT_LT(e.user, o.users);
    ASSERT_LT(e.item, o.items);
    EXPECT_TRUE(observed.insert({e.user, e.item}).second) << "duplicate event";
    EXPECT_GE(e.ts_ms, o.start_ms);
    EXPECT_LT(e.ts_ms, o.start_ms + int64_t{o.days} * 86'400'000);
    if (n > 0) {
      EXPECT_LE(w.events[n - 1].ts_ms, e.ts_ms);
    }
  }
  std::vector<uint32_t> per_user(o.users, 0);
  for (size_t n = 0; n < w.test.size(); ++n) {
    const Pair& p = w.test[n];
    EXPECT_FALSE(observed.count({p.user, p.item})) << "test pair is a training pair";
    if (n > 0) {
      const Pair& q = w.test[n - 1];
      EXPECT_TRUE(q.user < p.user || (q.user == p.user && q.item < p.item));
    }
    ++per_user[p.user];
  }
  for (uint32_t c : per_user) EXPECT_LE(c, o.test_items_per_user);
  EXPECT_GT(w.test.size(), o.users * 5u);
  const std::set<std::string> names(w.item_names.begin(), w.item_names.end());
  EXPECT_EQ(names.size(), o.items);
  for (const std::string& n : w.item_names) {
    EXPECT_NE(n.find(" #"), std::string::npos) << n;
    EXPECT_EQ(n.find(','), std::string::npos) << n;
  }
  Interactions train;
  ASSERT_TRUE(w.TrainInteractions(&train).ok());
  EXPECT_EQ(train.size(), w.events.size());
  EXPECT_EQ(train.num_users(), o.users);
}

// The thinning generator is exact: per visibility decile, the observed count matches the
// expectation sum_{u,i} r min(1, c e_u e_i r^alpha), computed here by brute force over all
// pairs, within 4.5 standard deviations of a sum of independent Bernoulli variables.
TEST(Synth, ObservedCountsMatchTheExposureModelExactly) {
  SynthWorld w;
  const SynthOptions o = Small();
  ASSERT_TRUE(GenerateSynthWorld(o, &w).ok());
  std::vector<uint32_t> order(o.items);
  for (uint32_t i = 0; i < o.items; ++i) order[i] = i;
  std::sort(order.begin(), order.end(),
            [&](uint32_t a, uint32_t b) { return w.item_visibility[a] > w.item_visibility[b]; });
  std::vector<int> decile(o.items);
  for (uint32_t r = 0; r < o.items; ++r) decile[order[r]] = static_cast<int>(r * 10 / o.items);
  std::vector<double> mean(10, 0.0), var(10, 0.0), seen(10, 0.0);
  for (uint32_t u = 0; u < o.users; ++u) {
    for (uint32_t i = 0; i < o.items; ++i) {
      const double r = w.Relevance(u, i);
      const double p = r * std::min(1.0, w.exposure_scale * w.user_activity[u] *
                                             w.item_visibility[i] * std::pow(r, o.alpha));
      mean[decile[i]] += p;
      var[decile[i]] += p * (1 - p);
    }
  }
  for (const SynthEvent& e : w.events) seen[decile[e.item]] += 1;
  for (int d = 0; d < 10; ++d) {
    EXPECT_NEAR(seen[d], mean[d], 4.5 * std::sqrt(var[d]) + 1.0) << "decile " << d;
  }
  // And the bias is strong: the most visible tenth of the tools gets far more than a tenth
  // of the borrowings.
  EXPECT_GT(seen[0] / static_cast<double>(w.events.size()), 0.2);
}

// The test set follows true relevance, not exposure: its share of the most visible decile is
// close to that decile's share of relevance mass, far below its share of borrowings.
TEST(Synth, TestSetIsNotDrivenByExposure) {
  SynthWorld w;
  ASSERT_TRUE(GenerateSynthWorld(Small(), &w).ok());
  std::vector<double> vis = w.item_visibility;
  std::nth_element(vis.begin(), vis.begin() + 40, vis.end(), std::greater<double>());
  const double cut = vis[40];
  auto head = [&](uint32_t i) { return w.item_visibility[i] > cut; };
  double ev = 0, te = 0;
  for (const SynthEvent& e : w.events) ev += head(e.item);
  for (const Pair& p : w.test) te += head(p.item);
  ev /= w.events.size();
  te /= w.test.size();
  EXPECT_LT(te, 0.2);
  EXPECT_GT(ev, 2 * te);
}

TEST(Synth, WritesCsvFiles) {
  SynthOptions o = Small();
  o.users = 20;
  o.items = 30;
  o.target_interactions = 40;
  SynthWorld w;
  ASSERT_TRUE(GenerateSynthWorld(o, &w).ok());
  const std::string dir =
      (std::filesystem::temp_directory_path() / ("plumb_synth_test_" + std::to_string(::getpid())))
          .string();
  ASSERT_TRUE(WriteSynthCsv(w, dir).ok());
  auto lines = [](const std::string& path) {
    std::ifstream f(path);
    std::vector<std::string> out;
    for (std::string l; std::getline(f, l);) out.push_back(l);
    return out;
  };
  const auto events = lines(dir + "/events.csv");
  ASSERT_EQ(events.size(), w.events.size() + 1);
  EXPECT_EQ(events[0], "user,item,ts");
  EXPECT_EQ(events[1], MemberLabel(w.events[0].user) + "," + ToolLabel(w.events[0].item) + "," +
                           std::to_string(w.events[0].ts_ms));
  const auto test = lines(dir + "/test.csv");
  ASSERT_EQ(test.size(), w.test.size() + 1);
  EXPECT_EQ(test[0], "user,item");
  const auto items = lines(dir + "/items.csv");
  ASSERT_EQ(items.size(), 31u);
  EXPECT_EQ(items[0], "item,name");
  EXPECT_EQ(items[3], "t2," + w.item_names[2]);
  std::filesystem::remove_all(dir);
  // An unwritable place is an IoError, not a crash.
  EXPECT_EQ(WriteSynthCsv(w, "/proc/plumb_no_such_dir").code(), Status::Code::kIoError);
}

// With a drift and arrivals the generator stays exact. Each pair is observed in the first
// phase with p1 = r1 min(1, c s1 o1 e_u v1_i r1^a) and, if not, in the second with p2 (same
// form with the late shelf or tastes; s = the phase's share of the window, o = the share of
// the phase in which both member and tool exist). So the expected count of each phase is a
// sum over all pairs of p1, and of (1 - p1) p2; both are computed here by brute force and
// compared with what was generated, within 4.5 standard deviations.
void ExpectPhasesExact(SynthDrift drift) {
  SynthOptions o = Small();
  o.drift = drift;
  o.drift_strength = 0.8;
  o.arrival_span = 0.6;
  SynthWorld w;
  ASSERT_TRUE(GenerateSynthWorld(o, &w).ok());
  const int64_t window = static_cast<int64_t>(o.days) * 86'400'000;
  const int64_t cut = static_cast<int64_t>(o.drift_at * static_cast<double>(window));
  auto overlap = [&](int64_t begin, int64_t end, uint32_t u, uint32_t i) {
    const int64_t from = std::max({begin, w.user_join_ms[u], w.item_join_ms[i]});
    return from >= end ? 0.0 : static_cast<double>(end - from) / static_cast<double>(end - begin);
  };
  const double s1 = static_cast<double>(cut) / static_cast<double>(window), s2 = 1.0 - s1;
  double mean[2] = {0, 0}, var[2] = {0, 0};
  for (uint32_t u = 0; u < o.users; ++u) {
    for (uint32_t i = 0; i < o.items; ++i) {
      const double r1 = w.EarlyRelevance(u, i), r2 = w.Relevance(u, i);
      const double p1 =
          r1 * std::min(1.0, w.exposure_scale * s1 * overlap(0, cut, u, i) * w.user_activity[u] *
                                 w.item_visibility[i] * std::pow(r1, o.alpha));
      const double p2 =
          (1.0 - p1) * r2 *
          std::min(1.0, w.exposure_scale * s2 * overlap(cut, window, u, i) * w.user_activity[u] *
                            w.item_visibility_late[i] * std::pow(r2, o.alpha));
      mean[0] += p1;
      var[0] += p1 * (1 - p1);
      mean[1] += p2;
      var[1] += p2 * (1 - p2);
    }
  }
  double seen[2] = {0, 0};
  for (const SynthEvent& e : w.events) {
    const int64_t t = e.ts_ms - o.start_ms;
    seen[t < cut ? 0 : 1] += 1;
    // Nothing is borrowed before both the member and the tool exist.
    EXPECT_GE(t, std::max(w.user_join_ms[e.user], w.item_join_ms[e.item]));
  }
  for (int p = 0; p < 2; ++p) {
    EXPECT_NEAR(seen[p], mean[p], 4.5 * std::sqrt(var[p]) + 1.0) << "phase " << p;
  }
}

TEST(Synth, PopularityDriftAndArrivalsAreExact) { ExpectPhasesExact(SynthDrift::kPopularity); }
TEST(Synth, TasteDriftAndArrivalsAreExact) { ExpectPhasesExact(SynthDrift::kTastes); }

// After a popularity drift the late borrowings follow the new shelf: the tools most visible
// in the second phase get most of the second phase's borrowings, and their share there is far
// above their share before the drift.
TEST(Synth, LateBorrowingsFollowTheNewShelf) {
  SynthOptions o = Small();
  o.drift = SynthDrift::kPopularity;
  SynthWorld w;
  ASSERT_TRUE(GenerateSynthWorld(o, &w).ok());
  std::vector<double> late = w.item_visibility_late;
  std::nth_element(late.begin(), late.begin() + 40, late.end(), std::greater<double>());
  const double bar = late[40];
  const int64_t cut = static_cast<int64_t>(o.drift_at * o.days * 86'400'000.0);
  double top[2] = {0, 0}, all[2] = {0, 0};
  for (const SynthEvent& e : w.events) {
    const int p = e.ts_ms - o.start_ms < cut ? 0 : 1;
    all[p] += 1;
    if (w.item_visibility_late[e.item] > bar) top[p] += 1;
  }
  EXPECT_GT(top[1] / all[1], 0.2);
  EXPECT_GT(top[1] / all[1], 2.0 * top[0] / all[0]);
}

// After a taste drift the test set follows the late tastes: its pairs' mean late relevance is
// well above their mean early relevance (a fresh draw of strength 0.8 leaves a correlation of
// sqrt(1 - 0.64) = 0.6 between early and late tastes).
TEST(Synth, TestFollowsLateTastes) {
  SynthOptions o = Small();
  o.drift = SynthDrift::kTastes;
  o.drift_strength = 0.8;
  SynthWorld w;
  ASSERT_TRUE(GenerateSynthWorld(o, &w).ok());
  ASSERT_FALSE(w.test.empty());
  double late = 0, early = 0;
  for (const Pair& p : w.test) {
    late += w.Relevance(p.user, p.item);
    early += w.EarlyRelevance(p.user, p.item);
  }
  EXPECT_GT(late, 1.3 * early);
}

// Without drift or arrivals the world is what it was before those options existed (the
// demo's figures and every test's expectations rest on it): the early and late views agree.
TEST(Synth, NoDriftMeansOnePhase) {
  SynthWorld w;
  ASSERT_TRUE(GenerateSynthWorld(Small(), &w).ok());
  EXPECT_EQ(w.user_taste_late.rows(), 0);
  EXPECT_EQ(w.item_visibility, w.item_visibility_late);
  for (uint32_t u = 0; u < 5; ++u) EXPECT_EQ(w.Relevance(u, 3), w.EarlyRelevance(u, 3));
}

TEST(Synth, RejectsBadOptions) {
  SynthWorld w;
  SynthOptions o = Small();
  o.users = 1;
  EXPECT_EQ(GenerateSynthWorld(o, &w).code(), Status::Code::kInvalidArgument);
  o = Small();
  o.target_interactions = 300 * 400;
  EXPECT_EQ(GenerateSynthWorld(o, &w).code(), Status::Code::kInvalidArgument);
  o = Small();
  o.zipf = -1;
  EXPECT_EQ(GenerateSynthWorld(o, &w).code(), Status::Code::kInvalidArgument);
  o = Small();
  o.relevance_offset = -40;  // almost nothing is relevant: the target cannot be reached
  const Status st = GenerateSynthWorld(o, &w);
  EXPECT_EQ(st.code(), Status::Code::kInvalidArgument);
  EXPECT_NE(st.message().find("unreachable"), std::string::npos) << st.ToString();
  for (double at : {0.0, 1.0}) {
    o = Small();
    o.drift_at = at;
    EXPECT_EQ(GenerateSynthWorld(o, &w).code(), Status::Code::kInvalidArgument) << at;
  }
  o = Small();
  o.arrival_span = 1.0;
  EXPECT_EQ(GenerateSynthWorld(o, &w).code(), Status::Code::kInvalidArgument);
  o = Small();
  o.drift_strength = 1.5;
  EXPECT_EQ(GenerateSynthWorld(o, &w).code(), Status::Code::kInvalidArgument);
  SynthDrift d;
  EXPECT_TRUE(ParseSynthDrift("tastes", &d).ok());
  EXPECT_EQ(d, SynthDrift::kTastes);
  EXPECT_EQ(ParseSynthDrift("sideways", &d).code(), Status::Code::kInvalidArgument);
}

}  // namespace
}  // namespace plumb::trainer
