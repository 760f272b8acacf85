#include "trainer/online/train_metrics.h"

#include <prometheus/counter.h>
#include <prometheus/family.h>
#include <prometheus/gauge.h>
#include <prometheus/registry.h>

#include <algorithm>
#include <cstdio>

#include "trainer/online/training_config.h"

namespace plumb::online {

void TrainMetrics::TotalFeed::Update(uint64_t total) {
  if (total > seen) {
    counter->Increment(static_cast<double>(total - seen));
    seen = total;
  }
}

TrainMetrics::TrainMetrics() : registry_(std::make_shared<prometheus::Registry>()) {
  using prometheus::BuildCounter;
  using prometheus::BuildGauge;
  prometheus::Registry& r = *registry_;

  accepted_.counter = &BuildCounter()
                           .Name("plumb_events_accepted_total")
                           .Help("Events appended durably to the event log")
                           .Register(r)
                           .Add({});
  duplicates_.counter = &BuildCounter()
                             .Name("plumb_events_duplicate_total")
                             .Help(
                                 "Events not appended because their event_id was already "
                                 "accepted (acknowledged as duplicates)")
                             .Register(r)
                             .Add({});
  write_failures_.counter =
      &BuildCounter()
           .Name("plumb_event_log_write_failures_total")
           .Help(
               "Appends to the event log that failed (full disk, device error); their events "
               "were refused, none acknowledged")
           .Register(r)
           .Add({});
  failed_events_.counter = &BuildCounter()
                                .Name("plumb_event_log_failed_events_total")
                                .Help("Events in failed appends to the event log (refused)")
                                .Register(r)
                                .Add({});
  auto& rejected = BuildCounter()
                       .Name("plumb_events_rejected_total")
                       .Help("Events refused by validation, by reason")
                       .Register(r);
  for (int i = 0; i < kNumRejectReasons; ++i) {
    const auto reason = static_cast<RejectReason>(i);
    rejected_[i] = &rejected.Add({{"reason", std::string(RejectReasonLabel(reason))}});
  }
  calls_ = &BuildCounter()
                .Name("plumb_requests_total")
                .Help("Finished EventIngest and ModelControl calls by method and gRPC status code")
                .Register(r);
  undecodable_ = &BuildCounter()
                      .Name("plumb_undecodable_messages_total")
                      .Help(
                          "Requests or stream messages that could not be decoded (e.g. invalid "
                          "UTF-8 in a string field), by method; each failed its call with "
                          "INVALID_ARGUMENT")
                      .Register(r);
  trained_.counter = &BuildCounter()
                          .Name("plumb_events_trained_total")
                          .Help("Events folded into the training state by the online loop")
                          .Register(r)
                          .Add({});
  samples_family_ = &BuildCounter()
                         .Name("plumb_training_samples_total")
                         .Help("Training samples stepped, by objective")
                         .Register(r);
  loss_family_ = &BuildGauge()
                      .Name("plumb_training_loss")
                      .Help("Mean loss of the last mini-batches, by objective")
                      .Register(r);
  auto& candidates = BuildCounter()
                         .Name("plumb_candidate_versions_total")
                         .Help(
                             "Candidate versions built, by gate outcome (passed, failed, "
                             "skipped: not gated, e.g. nothing to compare with)")
                         .Register(r);
  passed_.counter = &candidates.Add({{"outcome", "passed"}});
  failed_.counter = &candidates.Add({{"outcome", "failed"}});
  skipped_.counter = &candidates.Add({{"outcome", "skipped"}});
  auto& refits = BuildCounter()
                     .Name("plumb_refits_total")
                     .Help("Background refits of the whole history, by outcome")
                     .Register(r);
  refits_done_.counter = &refits.Add({{"outcome", "done"}});
  refits_failed_.counter = &refits.Add({{"outcome", "failed"}});
  refit_running_ = &BuildGauge()
                        .Name("plumb_refit_running")
                        .Help("1 while a background refit runs")
                        .Register(r)
                        .Add({});
  refit_seconds_ = &BuildGauge()
                        .Name("plumb_refit_last_duration_seconds")
                        .Help("Wall time of the last completed refit")
                        .Register(r)
                        .Add({});
  refit_coverage_ = &BuildGauge()
                         .Name("plumb_refit_coverage_ratio")
                         .Help("Share of today's training pairs that the model's last refit "
                               "covered (the rest were learned incrementally)")
                         .Register(r)
                         .Add({});
  config_pending_ = &BuildGauge()
                         .Name("plumb_training_config_change_pending")
                         .Help("1 while versions are trained with an older configuration and a "
                               "rebuild with the current one is under way (nothing published)")
                         .Register(r)
                         .Add({});
  config_family_ = &BuildGauge()
                        .Name("plumb_training_config_info")
                        .Help("The training configuration in labels; value always 1")
                        .Register(r);
  lag_events_ = &BuildGauge()
                     .Name("plumb_trainer_lag_events")
                     .Help("Last log sequence minus trained sequence")
                     .Register(r)
                     .Add({});
  lag_seconds_ = &BuildGauge()
                      .Name("plumb_trainer_lag_seconds")
                      .Help("Age of the oldest untrained event (0 when caught up)")
                      .Register(r)
                      .Add({});
  auto& recall = BuildGauge()
                     .Name("plumb_validation_recall_ratio")
                     .Help(
                         "Recall@K on the held-out validation sample, of the active version "
                         "and of the last candidate (label role)")
                     .Register(r);
  recall_active_ = &recall.Add({{"role", "active"}});
  recall_candidate_ = &recall.Add({{"role", "candidate"}});
  active_version_ = &BuildGauge()
                         .Name("plumb_trainer_active_version")
                         .Help("Active embedding version (0 = none)")
                         .Register(r)
                         .Add({});
  last_publish_ = &BuildGauge()
                       .Name("plumb_last_publish_timestamp_seconds")
                       .Help("Unix time of the last published version")
                       .Register(r)
                       .Add({});
  log_events_ = &BuildGauge()
                     .Name("plumb_event_log_events")
                     .Help("Events in the event log now (retention removes trained-on ones)")
                     .Register(r)
                     .Add({});
  log_bytes_ = &BuildGauge()
                    .Name("plumb_event_log_bytes")
                    .Help("Stored size of the events in the log (keys and values, before "
                          "compression)")
                    .Register(r)
                    .Add({});
  log_oldest_age_ = &BuildGauge()
                         .Name("plumb_event_log_oldest_event_age_seconds")
                         .Help("Age of the oldest event in the log by its timestamp (0 when empty)")
                         .Register(r)
                         .Add({});
  pair_history_ = &BuildGauge()
                       .Name("plumb_pair_history_pairs")
                       .Help("(user, item) pairs whose removed events retention folded into the "
                             "store's pair history")
                       .Register(r)
                       .Add({});
  retention_removed_.counter = &BuildCounter()
                                    .Name("plumb_retention_removed_events_total")
                                    .Help("Events removed from the log by retention")
                                    .Register(r)
                                    .Add({});
  retention_removed_bytes_.counter =
      &BuildCounter()
           .Name("plumb_retention_removed_bytes_total")
           .Help("Stored bytes of the events retention removed from the log")
           .Register(r)
           .Add({});
  auto& passes = BuildCounter()
                     .Name("plumb_retention_passes_total")
                     .Help("Retention passes over the event log, by outcome")
                     .Register(r);
  retention_passes_.counter = &passes.Add({{"outcome", "done"}});
  retention_failed_.counter = &passes.Add({{"outcome", "failed"}});
  retention_seconds_ = &BuildGauge()
                            .Name("plumb_retention_last_duration_seconds")
                            .Help("Wall time of the last retention pass")
                            .Register(r)
                            .Add({});
}

void TrainMetrics::RefreshLog(const store::LogStats& log, const RetentionTotals* retention,
                              int64_t now_ms) {
  std::lock_guard<std::mutex> lock(mu_);
  log_events_->Set(static_cast<double>(log.events));
  log_bytes_->Set(static_cast<double>(log.bytes));
  log_oldest_age_->Set(log.events > 0 && now_ms > log.oldest_timestamp_ms
                           ? (now_ms - log.oldest_timestamp_ms) / 1000.0
                           : 0.0);
  pair_history_->Set(static_cast<double>(log.history_pairs));
  if (retention == nullptr) return;
  retention_removed_.Update(retention->removed_events);
  retention_removed_bytes_.Update(retention->removed_bytes);
  retention_passes_.Update(retention->passes - retention->failed_passes);
  retention_failed_.Update(retention->failed_passes);
  retention_seconds_->Set(retention->last_pass_seconds);
}

TrainMetrics::~TrainMetrics() = default;

void TrainMetrics::CountRejected(RejectReason reason, uint64_t n) {
  rejected_[static_cast<int>(reason)]->Increment(static_cast<double>(n));
}

void TrainMetrics::CountCall(const std::string& method, const std::string& code) {
  calls_->Add({{"method", method}, {"code", code}}).Increment();
}

void TrainMetrics::CountUndecodable(const std::string& method) {
  undecodable_->Add({{"method", method}}).Increment();
}

double TrainMetrics::calls(const std::string& method, const std::string& code) const {
  return calls_->Has({{"method", method}, {"code", code}})
             ? calls_->Add({{"method", method}, {"code", code}}).Value()
             : 0.0;
}

double TrainMetrics::undecodable(const std::string& method) const {
  return undecodable_->Has({{"method", method}}) ? undecodable_->Add({{"method", method}}).Value()
                                                 : 0.0;
}

double TrainMetrics::rejected(RejectReason reason) const {
  return rejected_[static_cast<int>(reason)]->Value();
}
double TrainMetrics::accepted() const { return accepted_.counter->Value(); }
double TrainMetrics::duplicates() const { return duplicates_.counter->Value(); }

void TrainMetrics::Refresh(const CommitterStats& committer, const OnlineStatus* loop,
                           int64_t now_ms) {
  std::lock_guard<std::mutex> lock(mu_);
  accepted_.Update(committer.appended);
  duplicates_.Update(committer.duplicates);
  write_failures_.Update(committer.failed_groups);
  failed_events_.Update(committer.failed_events);
  if (loop == nullptr) return;

  if (loss_ == nullptr || loop->objective != objective_) {
    // The first series counts the loop's whole total; a series for a later objective
    // (the objective does not change while a loop runs) counts from now on.
    samples_.seen = loss_ == nullptr ? 0 : loop->samples_trained;
    objective_ = loop->objective;
    loss_ = &loss_family_->Add({{"objective", objective_}});
    samples_.counter = &samples_family_->Add({{"objective", objective_}});
  }
  samples_.Update(loop->samples_trained);
  trained_.Update(loop->events_trained);
  passed_.Update(loop->candidates_passed);
  failed_.Update(loop->candidates_failed);
  skipped_.Update(loop->candidates_skipped);
  refits_done_.Update(loop->refits_completed);
  refits_failed_.Update(loop->refits_failed);
  refit_running_->Set(loop->refit_running ? 1.0 : 0.0);
  refit_seconds_->Set(loop->last_refit_seconds);
  refit_coverage_->Set(loop->train_pairs > 0 ? static_cast<double>(loop->refit_pairs) /
                                                   static_cast<double>(loop->train_pairs)
                                             : 0.0);
  config_pending_->Set(loop->pending_config_change.empty() ? 0.0 : 1.0);
  const store::TrainingConfig& t = loop->training;
  const std::string text = FormatTrainingConfig(t);
  if (config_ == nullptr || text != config_text_) {
    if (config_ != nullptr) config_family_->Remove(config_);
    auto num = [](double v) {
      char buf[32];
      std::snprintf(buf, sizeof buf, "%g", v);
      return std::string(buf);
    };
    config_ = &config_family_->Add({{"objective", t.objective},
                                    {"dim", std::to_string(t.dim)},
                                    {"cpr_k", std::to_string(t.cpr_k)},
                                    {"cpr_mix_share", num(t.cpr_mix_share)},
                                    {"beta", num(t.beta)},
                                    {"optimizer", t.optimizer},
                                    {"learning_rate", num(t.learning_rate)},
                                    {"l2", num(t.l2)},
                                    {"epochs", std::to_string(t.epochs)},
                                    {"replay_ratio", num(t.replay_ratio)},
                                    {"holdout_fraction", num(t.holdout_fraction)},
                                    {"seed", std::to_string(t.seed)}});
    config_->Set(1.0);
    config_text_ = text;
  }
  loss_->Set(loop->last_loss);

  const uint64_t last = std::max(loop->last_sequence, committer.last_seq);
  lag_events_->Set(
      last > loop->trained_sequence ? static_cast<double>(last - loop->trained_sequence) : 0.0);
  lag_seconds_->Set(loop->oldest_untrained_received_ms > 0 &&
                            now_ms > loop->oldest_untrained_received_ms
                        ? (now_ms - loop->oldest_untrained_received_ms) / 1000.0
                        : 0.0);
  recall_active_->Set(loop->active_validation_recall);
  recall_candidate_->Set(loop->candidate_validation_recall);
  active_version_->Set(static_cast<double>(loop->active_version));
  last_publish_->Set(loop->last_publish_ms / 1000.0);
}

}  // namespace plumb::online
