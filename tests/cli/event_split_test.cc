// plumb split's divisions (cli/event_split.h) on hand-worked histories, and the CSV writer's
// round trip through the reader.
#include "cli/event_split.h"

#include <gtest/gtest.h>
#include <unistd.h>

#include <algorithm>
#include <cmath>
#include <filesystem>
#include <map>
#include <set>

#include "cli/csv_reader.h"
#include "cli/csv_writer.h"

namespace plumb::cli {
namespace {

CsvEvent Ev(const std::string& user, const std::string& item, int64_t ts = 0) {
  CsvEvent e;
  e.user = user;
  e.item = item;
  e.timestamp_ms = ts;
  return e;
}

std::vector<size_t> Rows(std::initializer_list<size_t> r) { return r; }

using PairKey = std::pair<std::string, std::string>;

std::set<PairKey> PairsOf(const std::vector<CsvEvent>& rows, const std::vector<size_t>& which) {
  std::set<PairKey> out;
  for (size_t r : which) out.insert({rows[r].user, rows[r].item});
  return out;
}

// The history of the two hand-worked temporal cases below.
std::vector<CsvEvent> TemporalHistory() {
  return {
      Ev("a", "y", 2), Ev("b", "p", 10), Ev("a", "x", 1), Ev("a", "v", 5), Ev("b", "q", 10),
      Ev("a", "w", 4), Ev("c", "x", 7),  Ev("a", "z", 3), Ev("a", "x", 6),
  };
}

// Hand-worked: user a has pairs (by earliest ts) x@1, y@2, z@3, w@4, v@5 (x twice: ts 1 and
// 6, so its earliest is 1); user b has p@10, q@10 (a tie: file order decides, p first);
// user c has one pair. holdout 0.4: a holds out round(0.4 · 5) = 2 pairs (w, v), b
// round(0.8) = 1 (q), c min(round(0.4), 0) = 0.
TEST(EventSplitTest, TemporalHoldsOutEachUsersLatestPairs) {
  const std::vector<CsvEvent> rows = TemporalHistory();
  EventSplitOptions o;
  o.kind = SplitKind::kTemporal;
  o.holdout_fraction = 0.4;
  EventSplit s;
  ASSERT_TRUE(SplitEvents(rows, o, &s).ok());
  EXPECT_EQ(s.pairs, 8u);
  EXPECT_EQ(s.held_out, 3u);
  EXPECT_EQ(s.kept, 3u);
  EXPECT_EQ(s.test_rows, Rows({3, 4, 5}));  // a,v  b,q  a,w: first rows of the pairs, ascending
  EXPECT_TRUE(s.validation_rows.empty());
  EXPECT_EQ(s.train_rows, Rows({0, 1, 2, 6, 7, 8}));  // both events of (a, x) stay together
  EXPECT_EQ(s.cold_user_pairs, 0u);
  EXPECT_EQ(s.cold_item_pairs, 3u);  // v, q and w appear in no other pair
}

// The same history with half of the held-out pairs for validation: a's held-out pairs are
// w (earlier) and v; round(0.5 · 2) = 1 goes to validation: w. b's one: round(0.5) = 1
// (half away from zero), so q goes to validation and b has no test pair.
TEST(EventSplitTest, TemporalValidationTakesTheEarlierHeldOutPairs) {
  const std::vector<CsvEvent> rows = TemporalHistory();
  EventSplitOptions o;
  o.kind = SplitKind::kTemporal;
  o.holdout_fraction = 0.4;
  o.validation_fraction = 0.5;
  EventSplit s;
  ASSERT_TRUE(SplitEvents(rows, o, &s).ok());
  EXPECT_EQ(s.validation_rows, Rows({4, 5}));  // b,q and a,w
  EXPECT_EQ(s.test_rows, Rows({3}));           // a,v
}

TEST(EventSplitTest, ColdPairsAreCounted) {
  // The temporal rule leaves every user a training pair, so only items can be cold here:
  // "only" and "y" appear in one held-out pair each and nowhere else.
  const std::vector<CsvEvent> rows = {Ev("a", "x", 1), Ev("a", "only", 2), Ev("b", "x", 1),
                                      Ev("b", "y", 2)};
  EventSplitOptions o;
  o.kind = SplitKind::kTemporal;
  o.holdout_fraction = 0.5;  // each user: round(1) = 1 of 2
  EventSplit s;
  ASSERT_TRUE(SplitEvents(rows, o, &s).ok());
  EXPECT_EQ(s.test_rows, Rows({1, 3}));
  EXPECT_EQ(s.cold_user_pairs, 0u);
  EXPECT_EQ(s.cold_item_pairs, 2u);  // "only" and "y" have no training pair
}

TEST(EventSplitTest, TemporalNeedsTimestampsAndNamesTheRow) {
  const std::vector<CsvEvent> rows = {Ev("a", "x", 1), Ev("a", "y", 0)};
  EventSplitOptions o;
  o.kind = SplitKind::kTemporal;
  EventSplit s;
  Status st = SplitEvents(rows, o, &s);
  ASSERT_FALSE(st.ok());
  EXPECT_NE(st.message().find("data row 2"), std::string::npos) << st.message();
}

TEST(EventSplitTest, RejectsBadFractions) {
  const std::vector<CsvEvent> rows = {Ev("a", "x"), Ev("b", "y")};
  EventSplit s;
  EventSplitOptions o;
  o.holdout_fraction = 0.0;
  EXPECT_FALSE(SplitEvents(rows, o, &s).ok());
  o.holdout_fraction = 1.0;
  EXPECT_FALSE(SplitEvents(rows, o, &s).ok());
  o.holdout_fraction = 0.5;
  o.validation_fraction = 1.5;
  EXPECT_FALSE(SplitEvents(rows, o, &s).ok());
  EXPECT_FALSE(SplitEvents({}, EventSplitOptions{}, &s).ok());
  SplitKind k;
  EXPECT_FALSE(ParseSplitKind("by-time", &k).ok());
}

// 60 users x 10 items, each pair once, and every third pair repeated: the random split holds
// out exactly round(0.25 · 600) = 150 pairs, never separates a pair's events, and depends on
// the seed alone.
std::vector<CsvEvent> Grid() {
  std::vector<CsvEvent> rows;
  for (int u = 0; u < 60; ++u) {
    for (int i = 0; i < 10; ++i) {
      rows.push_back(Ev("u" + std::to_string(u), "i" + std::to_string(i)));
      if ((u * 10 + i) % 3 == 0)
        rows.push_back(Ev("u" + std::to_string(u), "i" + std::to_string(i)));
    }
  }
  return rows;
}

TEST(EventSplitTest, RandomHoldsOutTheRoundedShareOfPairsAndKeepsPairsWhole) {
  const std::vector<CsvEvent> rows = Grid();
  EventSplitOptions o;
  o.holdout_fraction = 0.25;
  o.validation_fraction = 0.2;
  o.seed = 7;
  EventSplit s;
  ASSERT_TRUE(SplitEvents(rows, o, &s).ok());
  EXPECT_EQ(s.pairs, 600u);
  EXPECT_EQ(s.held_out, 150u);
  EXPECT_EQ(s.validation_rows.size(), 30u);  // round(0.2 · 150)
  EXPECT_EQ(s.test_rows.size(), 120u);
  const std::set<PairKey> train = PairsOf(rows, s.train_rows);
  const std::set<PairKey> test = PairsOf(rows, s.test_rows);
  const std::set<PairKey> validation = PairsOf(rows, s.validation_rows);
  EXPECT_EQ(train.size(), 450u);
  for (const PairKey& p : test) EXPECT_EQ(train.count(p) + validation.count(p), 0u);
  for (const PairKey& p : validation) EXPECT_EQ(train.count(p), 0u);
  // Every event of a training pair is in training: 600 pairs + 200 repeats = 800 rows.
  size_t train_events = 0;
  for (const CsvEvent& e : rows) train_events += train.count({e.user, e.item});
  EXPECT_EQ(s.train_rows.size(), train_events);

  EventSplit again;
  ASSERT_TRUE(SplitEvents(rows, o, &again).ok());
  EXPECT_EQ(again.test_rows, s.test_rows);
  o.seed = 8;
  ASSERT_TRUE(SplitEvents(rows, o, &again).ok());
  EXPECT_NE(again.test_rows, s.test_rows);
}

// With gamma = 0 the keep probability (min_pop / pop)^gamma is 1 for every item (core/split.h),
// so the debiased split keeps every held-out pair: the same pairs as the random split with the
// same seed (both hold out the same pairs first), nothing returned to training.
TEST(EventSplitTest, DebiasedEqualsRandomWhenGammaIsZero) {
  const std::vector<CsvEvent> rows = Grid();
  EventSplitOptions o;
  o.holdout_fraction = 0.3;
  o.seed = 11;
  EventSplit random, debiased;
  ASSERT_TRUE(SplitEvents(rows, o, &random).ok());
  o.kind = SplitKind::kDebiased;
  o.gamma = 0.0;
  ASSERT_TRUE(SplitEvents(rows, o, &debiased).ok());
  EXPECT_EQ(debiased.kept, debiased.held_out);
  EXPECT_EQ(debiased.test_rows, random.test_rows);
  EXPECT_EQ(debiased.train_rows, random.train_rows);
}

// gamma = 1: a pair held out of an item with training degree d is kept with probability
// min_pop / d. 1000 users, each with one rare item of its own and 5 of 100 "mid" items (50
// users each). A held-out rare item has training degree 0, read as 1, so min_pop = 1: every
// held-out rare pair is kept, and a held-out pair of mid item j (training degree
// D_j = 50 - held_j) with probability 1 / D_j. The random split with the same seed holds out
// the same pairs, which gives held_j; the kept count of mid pairs is checked against
// its binomial mean sum_j held_j / D_j within four standard deviations, and the pairs not
// kept must be back in training.
TEST(EventSplitTest, DebiasedKeepsPairsInInverseProportionToPopularity) {
  std::vector<CsvEvent> rows;
  for (int u = 0; u < 1000; ++u) {
    const std::string user = "u" + std::to_string(u);
    rows.push_back(Ev(user, "rare" + std::to_string(u)));
    for (int t = 0; t < 5; ++t) rows.push_back(Ev(user, "mid" + std::to_string((u * 5 + t) % 100)));
  }
  EventSplitOptions o;
  o.holdout_fraction = 0.5;
  o.seed = 5;
  EventSplit random, s;
  ASSERT_TRUE(SplitEvents(rows, o, &random).ok());
  o.kind = SplitKind::kDebiased;
  ASSERT_TRUE(SplitEvents(rows, o, &s).ok());
  ASSERT_EQ(s.held_out, 3000u);
  std::map<std::string, int> held;
  size_t held_rare = 0;
  for (size_t r : random.test_rows) {
    if (rows[r].item.starts_with("rare"))
      ++held_rare;
    else
      ++held[rows[r].item];
  }
  double mean = 0.0, variance = 0.0;
  for (const auto& [item, n] : held) {
    const double p = 1.0 / (50.0 - n);
    mean += n * p;
    variance += n * p * (1.0 - p);
  }
  size_t kept_rare = 0, kept_mid = 0;
  for (size_t r : s.test_rows) (rows[r].item.starts_with("rare") ? kept_rare : kept_mid) += 1;
  EXPECT_EQ(kept_rare, held_rare);
  EXPECT_NEAR(static_cast<double>(kept_mid), mean, 4.0 * std::sqrt(variance))
      << "expected about " << mean << " of " << (3000 - held_rare) << " held-out mid pairs";
  // Held-out pairs not kept went back to training: every row is in exactly one part.
  EXPECT_EQ(s.kept, kept_rare + kept_mid);
  EXPECT_EQ(s.train_rows.size() + s.test_rows.size(), rows.size());
  EXPECT_EQ(s.cold_item_pairs, kept_rare);  // a held-out rare item has no training pair
}

TEST(CsvWriterTest, QuotesOnlyWhatNeedsIt) {
  EXPECT_EQ(CsvField("plain id"), "plain id");
  EXPECT_EQ(CsvField("a,b"), "\"a,b\"");
  EXPECT_EQ(CsvField("say \"hi\""), "\"say \"\"hi\"\"\"");  // RFC 4180 2.7: quotes doubled
}

TEST(CsvWriterTest, ReaderReadsBackWhatTheWriterWrote) {
  std::vector<CsvEvent> rows = {Ev("m,1", "t\"2", 1700000000000), Ev("m2", "t3", 0)};
  rows[0].weight = 2.5f;
  rows[1].event_id = "e-2";
  const std::string path = (std::filesystem::temp_directory_path() /
                            ("plumb_csv_writer_" + std::to_string(::getpid()) + ".csv"))
                               .string();
  const std::vector<size_t> which = {1, 0};
  ASSERT_TRUE(WriteEventCsv(path, rows, which, ColumnsOf(rows)).ok());
  std::vector<CsvEvent> back;
  CsvReadReport report;
  ASSERT_TRUE(ReadEventCsv(path, CsvReadOptions{}, &back, &report).ok());
  std::filesystem::remove(path);
  ASSERT_EQ(back.size(), 2u);
  EXPECT_EQ(back[0].user, "m2");
  EXPECT_EQ(back[0].timestamp_ms, 0);
  EXPECT_EQ(back[0].event_id, "e-2");
  EXPECT_EQ(back[1].user, "m,1");
  EXPECT_EQ(back[1].item, "t\"2");
  EXPECT_EQ(back[1].timestamp_ms, 1700000000000);
  EXPECT_EQ(back[1].weight, 2.5f);
  EXPECT_EQ(back[1].event_id, "");
}

}  // namespace
}  // namespace plumb::cli
