#include "trainer/online/train_metrics.h"

#include <gtest/gtest.h>
#include <prometheus/registry.h>
#include <prometheus/text_serializer.h>

#include <map>
#include <sstream>
#include <string>

namespace plumb::online {
namespace {

// The exposition text as a map from "name{labels}" to value.
std::map<std::string, double> Scrape(const TrainMetrics& metrics) {
  const std::string text = prometheus::TextSerializer().Serialize(metrics.registry()->Collect());
  std::map<std::string, double> out;
  std::stringstream lines(text);
  for (std::string line; std::getline(lines, line);) {
    if (line.empty() || line[0] == '#') continue;
    const size_t space = line.rfind(' ');
    out[line.substr(0, space)] = std::stod(line.substr(space + 1));
  }
  return out;
}

TEST(TrainMetrics, NamesAreTheAgreedOnesAndValuesFollowTheTotals) {
  TrainMetrics metrics;
  metrics.CountRejected(RejectReason::kBadWeight, 3);
  metrics.CountRejected(RejectReason::kEmptyUserId);

  CommitterStats committer;
  committer.appended = 1'000;
  committer.duplicates = 7;
  committer.failed_groups = 4;
  committer.failed_events = 90;
  committer.last_seq = 1'000;
  OnlineStatus loop;
  loop.objective = "cpr";
  loop.last_sequence = 990;  // the committer has seen more: lag uses the larger
  loop.trained_sequence = 900;
  loop.events_trained = 900;
  loop.samples_trained = 50'000;
  loop.last_loss = 0.42;
  loop.candidates_passed = 2;
  loop.candidates_failed = 1;
  loop.candidates_skipped = 4;
  loop.active_version = 3;
  loop.active_validation_recall = 0.31;
  loop.candidate_validation_recall = 0.29;
  loop.oldest_untrained_received_ms = 10'000;
  loop.last_publish_ms = 1'700'000'000'500;
  metrics.Refresh(committer, &loop, /*now_ms=*/12'500);

  auto m = Scrape(metrics);
  // Names and labels as agreed in the project's metric list for plumb-train.
  EXPECT_EQ(m["plumb_events_accepted_total"], 1'000);
  EXPECT_EQ(m["plumb_events_duplicate_total"], 7);
  EXPECT_EQ(m["plumb_event_log_write_failures_total"], 4);
  EXPECT_EQ(m["plumb_event_log_failed_events_total"], 90);
  EXPECT_EQ(m["plumb_events_rejected_total{reason=\"bad_weight\"}"], 3);
  EXPECT_EQ(m["plumb_events_rejected_total{reason=\"empty_user_id\"}"], 1);
  EXPECT_EQ(m.count("plumb_events_rejected_total{reason=\"bad_timestamp\"}"), 1u);  // 0, present
  EXPECT_EQ(m["plumb_events_trained_total"], 900);
  EXPECT_EQ(m["plumb_trainer_lag_events"], 100);   // 1000 - 900
  EXPECT_EQ(m["plumb_trainer_lag_seconds"], 2.5);  // (12500 - 10000) ms
  EXPECT_EQ(m["plumb_training_loss{objective=\"cpr\"}"], 0.42);
  EXPECT_EQ(m["plumb_training_samples_total{objective=\"cpr\"}"], 50'000);
  EXPECT_EQ(m["plumb_candidate_versions_total{outcome=\"passed\"}"], 2);
  EXPECT_EQ(m["plumb_candidate_versions_total{outcome=\"failed\"}"], 1);
  EXPECT_EQ(m["plumb_candidate_versions_total{outcome=\"skipped\"}"], 4);  // not "passed"
  EXPECT_EQ(m["plumb_validation_recall_ratio{role=\"active\"}"], 0.31);
  EXPECT_EQ(m["plumb_validation_recall_ratio{role=\"candidate\"}"], 0.29);
  EXPECT_EQ(m["plumb_trainer_active_version"], 3);
  EXPECT_EQ(m["plumb_last_publish_timestamp_seconds"], 1'700'000'000.5);

  // Counters advance by the growth of the totals; caught up means zero lag seconds.
  committer.appended = 1'500;
  loop.trained_sequence = 1'000;
  loop.last_sequence = 1'000;
  loop.events_trained = 1'000;
  loop.samples_trained = 80'000;
  loop.oldest_untrained_received_ms = 0;
  metrics.Refresh(committer, &loop, 13'000);
  m = Scrape(metrics);
  EXPECT_EQ(m["plumb_events_accepted_total"], 1'500);
  EXPECT_EQ(m["plumb_events_trained_total"], 1'000);
  EXPECT_EQ(m["plumb_training_samples_total{objective=\"cpr\"}"], 80'000);
  EXPECT_EQ(m["plumb_trainer_lag_events"], 0);
  EXPECT_EQ(m["plumb_trainer_lag_seconds"], 0);
  EXPECT_EQ(metrics.accepted(), 1'500);
}

}  // namespace
}  // namespace plumb::online
