#include "trainer/online/train_metrics.h"

#include <prometheus/counter.h>
#include <prometheus/family.h>
#include <prometheus/gauge.h>
#include <prometheus/registry.h>

#include <algorithm>

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
