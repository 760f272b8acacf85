#include "trainer/online/control_service.h"

#include <algorithm>
#include <cmath>
#include <cstdio>
#include <string>
#include <vector>

#include "rpc/checked_methods.h"
#include "rpc/grpc_status.h"
#include "store/store.h"
#include "trainer/online/online_loop.h"

namespace plumb::online {
namespace {

std::string FormatShare(double percent) {
  char text[32];
  std::snprintf(text, sizeof text, "%g", percent);
  return text;
}

using rpc::ToGrpcStatus;

plumb::v1::GateOutcome WireGate(store::GateOutcome gate) {
  switch (gate) {
    case store::GateOutcome::kPassed:
      return plumb::v1::GATE_PASSED;
    case store::GateOutcome::kFailed:
      return plumb::v1::GATE_FAILED;
    case store::GateOutcome::kSkipped:
      return plumb::v1::GATE_SKIPPED;
    case store::GateOutcome::kUnspecified:
      return plumb::v1::GATE_OUTCOME_UNSPECIFIED;
  }
  return plumb::v1::GATE_OUTCOME_UNSPECIFIED;
}

void FillTraining(const store::TrainingConfig& c, plumb::v1::TrainingConfig* out) {
  if (!c.known()) return;
  out->set_origin(c.origin);
  out->set_objective(c.objective);
  out->set_dim(c.dim);
  out->set_cpr_k(c.cpr_k);
  out->set_cpr_mix_k(c.cpr_mix_k);
  out->set_cpr_mix_share(c.cpr_mix_share);
  out->set_beta(c.beta);
  out->set_optimizer(c.optimizer);
  out->set_learning_rate(c.learning_rate);
  out->set_l2(c.l2);
  out->set_batch_size(c.batch_size);
  out->set_epochs(c.epochs);
  out->set_replay_ratio(c.replay_ratio);
  out->set_holdout_fraction(c.holdout_fraction);
  out->set_seed(c.seed);
  out->set_refit_pairs(c.refit_pairs);
  for (double b : c.tune_betas) out->add_tune_betas(b);
  out->set_training_window_ms(c.training_window_ms);
}

void FillVersionInfo(const store::VersionManifest& m, uint64_t active, plumb::v1::VersionInfo* v) {
  v->set_version(m.version);
  v->set_created_ms(m.created_ms);
  v->set_objective(m.objective);
  v->set_events_seen(m.events_seen);
  v->set_num_users(m.num_users);
  v->set_num_items(m.num_items);
  v->set_dim(m.dim);
  v->set_validation_recall(m.validation_recall);
  v->set_validation_k(m.validation_k);
  v->set_gate(WireGate(m.gate));
  v->set_gate_reason(m.gate_reason);
  v->set_active(m.version == active);
  v->set_pinned(m.pinned);
  v->set_num_interactions(m.num_interactions);
  FillTraining(m.training, v->mutable_training());
  v->set_validation_shift(m.validation_shift);
  v->set_validation_shift_distance(m.validation_shift_distance);
  for (double x : m.target_group_shares) v->add_target_group_shares(x);
  for (double x : m.validation_group_shares) v->add_validation_group_shares(x);
  v->set_tune_reason(m.tune_reason);
}

}  // namespace

ControlService::ControlService(store::Store* store, OnlineLoop* loop,
                               const CallAdmission& admission, TrainMetrics* metrics)
    : store_(store), loop_(loop), admission_(admission) {
  using namespace plumb::v1;
  auto observer = [metrics](const char* method) -> rpc::CallObserver {
    if (metrics == nullptr) return {};
    return [metrics, method](const grpc::Status& status, bool undecodable, double) {
      if (undecodable) metrics->CountUndecodable(method);
      metrics->CountCall(method, rpc::GrpcCodeName(status.error_code()));
    };
  };
  const std::string service = ModelControl::service_full_name();
  MarkMethodStreamed(rpc::MethodIndex(service, "ListVersions"),
                     rpc::CheckedUnary<ListVersionsRequest, ListVersionsResponse>(
                         [this](grpc::ServerContext* c, const ListVersionsRequest* q,
                                ListVersionsResponse* r) { return ListVersions(c, q, r); },
                         observer("ListVersions")));
  MarkMethodStreamed(rpc::MethodIndex(service, "GetStatus"),
                     rpc::CheckedUnary<GetStatusRequest, TrainerStatus>(
                         [this](grpc::ServerContext* c, const GetStatusRequest* q,
                                TrainerStatus* r) { return GetStatus(c, q, r); },
                         observer("GetStatus")));
  MarkMethodStreamed(rpc::MethodIndex(service, "Activate"),
                     rpc::CheckedUnary<ActivateRequest, ActivateResponse>(
                         [this](grpc::ServerContext* c, const ActivateRequest* q,
                                ActivateResponse* r) { return Activate(c, q, r); },
                         observer("Activate")));
  MarkMethodStreamed(rpc::MethodIndex(service, "SetAutoActivate"),
                     rpc::CheckedUnary<SetAutoActivateRequest, TrainerStatus>(
                         [this](grpc::ServerContext* c, const SetAutoActivateRequest* q,
                                TrainerStatus* r) { return SetAutoActivate(c, q, r); },
                         observer("SetAutoActivate")));
  MarkMethodStreamed(rpc::MethodIndex(service, "SetCanary"),
                     rpc::CheckedUnary<SetCanaryRequest, TrainerStatus>(
                         [this](grpc::ServerContext* c, const SetCanaryRequest* q,
                                TrainerStatus* r) { return SetCanary(c, q, r); },
                         observer("SetCanary")));
  MarkMethodStreamed(rpc::MethodIndex(service, "EndCanary"),
                     rpc::CheckedUnary<EndCanaryRequest, TrainerStatus>(
                         [this](grpc::ServerContext* c, const EndCanaryRequest* q,
                                TrainerStatus* r) { return EndCanary(c, q, r); },
                         observer("EndCanary")));
  MarkMethodStreamed(rpc::MethodIndex(service, "SetPinned"),
                     rpc::CheckedUnary<SetPinnedRequest, VersionInfo>(
                         [this](grpc::ServerContext* c, const SetPinnedRequest* q, VersionInfo* r) {
                           return SetPinned(c, q, r);
                         },
                         observer("SetPinned")));
  MarkMethodStreamed(
      rpc::MethodIndex(service, "SetItemAvailability"),
      rpc::CheckedUnary<SetItemAvailabilityRequest, SetItemAvailabilityResponse>(
          [this](grpc::ServerContext* c, const SetItemAvailabilityRequest* q,
                 SetItemAvailabilityResponse* r) { return SetItemAvailability(c, q, r); },
          observer("SetItemAvailability")));
  MarkMethodStreamed(rpc::MethodIndex(service, "ListWithdrawnItems"),
                     rpc::CheckedUnary<ListWithdrawnItemsRequest, ListWithdrawnItemsResponse>(
                         [this](grpc::ServerContext* c, const ListWithdrawnItemsRequest* q,
                                ListWithdrawnItemsResponse* r) {
                           return ListWithdrawnItems(c, q, r);
                         },
                         observer("ListWithdrawnItems")));
}

grpc::Status ControlService::SetItemAvailability(
    grpc::ServerContext* context, const plumb::v1::SetItemAvailabilityRequest* request,
    plumb::v1::SetItemAvailabilityResponse* response) {
  InflightCalls::Scope scope;
  if (grpc::Status s = Admit(admission_, *context, &scope); !s.ok()) return s;
  const int n = request->item_ids_size();
  if (n == 0 || n > kMaxAvailabilityIds) {
    return grpc::Status(grpc::StatusCode::INVALID_ARGUMENT,
                        "item_ids: expected 1.." + std::to_string(kMaxAvailabilityIds) +
                            " ids, got " + std::to_string(n));
  }
  for (int j = 0; j < n; ++j) {
    const std::string& id = request->item_ids(j);
    if (id.empty() || id.size() > kMaxAvailabilityIdBytes) {
      return grpc::Status(grpc::StatusCode::INVALID_ARGUMENT,
                          "item_ids[" + std::to_string(j) + "]: expected 1.." +
                              std::to_string(kMaxAvailabilityIdBytes) + " bytes, got " +
                              std::to_string(id.size()));
    }
  }
  std::vector<std::string> ids(request->item_ids().begin(), request->item_ids().end());
  store::AvailabilityChange change;
  if (Status s = store_->SetItemsWithdrawn(ids, request->withdrawn(), &change); !s.ok()) {
    return ToGrpcStatus(s, request->withdrawn() ? "cannot withdraw items" : "cannot restore items");
  }
  response->set_changed(change.changed);
  response->set_unchanged(change.unchanged);
  response->set_withdrawn_items(change.withdrawn);
  return grpc::Status::OK;
}

grpc::Status ControlService::ListWithdrawnItems(
    grpc::ServerContext* context, const plumb::v1::ListWithdrawnItemsRequest* request,
    plumb::v1::ListWithdrawnItemsResponse* response) {
  InflightCalls::Scope scope;
  if (grpc::Status s = Admit(admission_, *context, &scope); !s.ok()) return s;
  if (request->limit() > static_cast<uint32_t>(kMaxAvailabilityIds)) {
    return grpc::Status(grpc::StatusCode::INVALID_ARGUMENT,
                        "limit: at most " + std::to_string(kMaxAvailabilityIds));
  }
  const size_t limit = request->limit() == 0 ? 1000 : request->limit();
  std::vector<store::WithdrawnItem> items;
  // One more than the page tells whether another page follows.
  if (Status s = store_->ListWithdrawnItems(request->start_after(), limit + 1, &items); !s.ok()) {
    return ToGrpcStatus(s, "cannot list withdrawn items");
  }
  const bool more = items.size() > limit;
  if (more) items.resize(limit);
  for (const store::WithdrawnItem& item : items) {
    plumb::v1::WithdrawnItem* out = response->add_items();
    out->set_item_id(item.item_id);
    out->set_withdrawn_ms(item.withdrawn_ms);
  }
  if (more) response->set_next_start_after(items.back().item_id);
  uint64_t generation = 0, withdrawn = 0;
  if (Status s = store_->GetAvailability(&generation, &withdrawn); !s.ok()) {
    return ToGrpcStatus(s, "cannot read the withdrawn set");
  }
  response->set_withdrawn_items(withdrawn);
  return grpc::Status::OK;
}

grpc::Status ControlService::ListVersions(grpc::ServerContext* context,
                                          const plumb::v1::ListVersionsRequest*,
                                          plumb::v1::ListVersionsResponse* response) {
  InflightCalls::Scope scope;
  if (grpc::Status s = Admit(admission_, *context, &scope); !s.ok()) return s;
  std::vector<store::VersionManifest> manifests;
  if (Status s = store_->ListVersions(&manifests); !s.ok()) {
    return ToGrpcStatus(s, "cannot list versions");
  }
  uint64_t active = 0;
  if (Status s = store_->GetActiveVersion(&active); !s.ok()) {
    return ToGrpcStatus(s, "cannot read the active version");
  }
  for (const store::VersionManifest& m : manifests) {
    FillVersionInfo(m, active, response->add_versions());
  }
  return grpc::Status::OK;
}

void ControlService::FillStatus(plumb::v1::TrainerStatus* out) const {
  const OnlineStatus s = loop_->status();
  out->set_active_version(s.active_version);
  // The log may have grown since the loop last looked.
  out->set_last_sequence(std::max(s.last_sequence, store_->LastSequence()));
  out->set_trained_sequence(s.trained_sequence);
  out->set_auto_activate(s.auto_activate);
  out->set_objective(s.objective);
  out->set_num_users(s.num_users);
  out->set_num_items(s.num_items);
  out->set_idle(s.idle);
  out->set_auto_activate_reason(s.auto_activate_reason);
  FillTraining(s.training, out->mutable_training());
  out->set_pending_config_change(s.pending_config_change);
  out->set_refit_running(s.refit_running);
  out->set_refit_reason(s.refit_reason);
  out->set_refits_completed(s.refits_completed);
  out->set_refits_failed(s.refits_failed);
  out->set_last_refit_seconds(s.last_refit_seconds);
  out->set_train_pairs(s.train_pairs);
  out->set_refit_pairs(s.refit_pairs);
  out->set_candidates_passed(s.candidates_passed);
  out->set_candidates_failed(s.candidates_failed);
  out->set_candidates_skipped(s.candidates_skipped);
  out->set_tuned_beta(s.tuned_beta);
  out->set_tune_reason(s.tune_reason);
  out->set_canary_version(s.canary.version);
  out->set_canary_share_percent(s.canary.share_bp / 100.0);
  out->set_canary_started_ms(s.canary.started_ms);
  uint64_t generation = 0, withdrawn = 0;
  if (store_->GetAvailability(&generation, &withdrawn).ok()) out->set_withdrawn_items(withdrawn);
  store::LogStats log;
  if (store_->GetLogStats(&log).ok()) {
    out->set_log_events(log.events);
    out->set_log_bytes(log.bytes);
    out->set_oldest_event_ms(log.events > 0 ? log.oldest_timestamp_ms : 0);
    out->set_retention_removed_events(log.removed_events);
    out->set_retention_removed_bytes(log.removed_bytes);
    out->set_retention_pairs(log.history_pairs);
  }
}

grpc::Status ControlService::GetStatus(grpc::ServerContext* context,
                                       const plumb::v1::GetStatusRequest*,
                                       plumb::v1::TrainerStatus* response) {
  InflightCalls::Scope scope;
  if (grpc::Status s = Admit(admission_, *context, &scope); !s.ok()) return s;
  FillStatus(response);
  return grpc::Status::OK;
}

grpc::Status ControlService::Activate(grpc::ServerContext* context,
                                      const plumb::v1::ActivateRequest* request,
                                      plumb::v1::ActivateResponse* response) {
  InflightCalls::Scope scope;
  if (grpc::Status s = Admit(admission_, *context, &scope); !s.ok()) return s;
  if (request->version() == 0) {
    return grpc::Status(grpc::StatusCode::INVALID_ARGUMENT,
                        "version is 0; name a kept version (see ListVersions)");
  }
  uint64_t previous = 0;
  if (Status s = loop_->Activate(request->version(), &previous); !s.ok()) {
    return ToGrpcStatus(s, "cannot activate version " + std::to_string(request->version()));
  }
  response->set_active_version(request->version());
  response->set_previous_version(previous);
  return grpc::Status::OK;
}

grpc::Status ControlService::SetCanary(grpc::ServerContext* context,
                                       const plumb::v1::SetCanaryRequest* request,
                                       plumb::v1::TrainerStatus* response) {
  InflightCalls::Scope scope;
  if (grpc::Status s = Admit(admission_, *context, &scope); !s.ok()) return s;
  if (request->version() == 0) {
    return grpc::Status(grpc::StatusCode::INVALID_ARGUMENT,
                        "version is 0; name a kept version other than the active one (see "
                        "ListVersions)");
  }
  const double percent = request->share_percent();
  // Resolution 0.01 %: one basis point.
  const double bp = std::round(percent * 100.0);
  if (!std::isfinite(percent) || bp < 1.0 || bp > 10000.0) {
    return grpc::Status(grpc::StatusCode::INVALID_ARGUMENT,
                        "share_percent must be 0.01..100, got " + FormatShare(percent));
  }
  if (Status s = loop_->SetCanary(request->version(), static_cast<uint32_t>(bp), nullptr);
      !s.ok()) {
    return ToGrpcStatus(
        s, "cannot serve version " + std::to_string(request->version()) + " as a canary");
  }
  FillStatus(response);
  return grpc::Status::OK;
}

grpc::Status ControlService::EndCanary(grpc::ServerContext* context,
                                       const plumb::v1::EndCanaryRequest* request,
                                       plumb::v1::TrainerStatus* response) {
  InflightCalls::Scope scope;
  if (grpc::Status s = Admit(admission_, *context, &scope); !s.ok()) return s;
  uint64_t version = 0;
  if (Status s = loop_->EndCanary(request->promote(), &version); !s.ok()) {
    return ToGrpcStatus(
        s, request->promote() ? "cannot promote the canary" : "cannot abort the canary");
  }
  FillStatus(response);
  return grpc::Status::OK;
}

grpc::Status ControlService::SetPinned(grpc::ServerContext* context,
                                       const plumb::v1::SetPinnedRequest* request,
                                       plumb::v1::VersionInfo* response) {
  InflightCalls::Scope scope;
  if (grpc::Status s = Admit(admission_, *context, &scope); !s.ok()) return s;
  const uint64_t version = request->version();
  if (version == 0) {
    return grpc::Status(grpc::StatusCode::INVALID_ARGUMENT,
                        "version is 0; name a kept version (see ListVersions)");
  }
  const std::string what = std::string("cannot ") + (request->pinned() ? "pin" : "unpin") +
                           " version " + std::to_string(version);
  if (Status s = store_->SetPinned(version, request->pinned()); !s.ok()) {
    return ToGrpcStatus(s, what);
  }
  store::VersionManifest manifest;
  uint64_t active = 0;
  if (Status s = store_->ReadManifest(version, &manifest); !s.ok()) return ToGrpcStatus(s, what);
  if (Status s = store_->GetActiveVersion(&active); !s.ok()) return ToGrpcStatus(s, what);
  FillVersionInfo(manifest, active, response);
  return grpc::Status::OK;
}

grpc::Status ControlService::SetAutoActivate(grpc::ServerContext* context,
                                             const plumb::v1::SetAutoActivateRequest* request,
                                             plumb::v1::TrainerStatus* response) {
  InflightCalls::Scope scope;
  if (grpc::Status s = Admit(admission_, *context, &scope); !s.ok()) return s;
  if (Status s = loop_->SetAutoActivate(request->enabled()); !s.ok()) {
    return ToGrpcStatus(s, "cannot change automatic activation");
  }
  FillStatus(response);
  return grpc::Status::OK;
}

}  // namespace plumb::online

namespace plumb::online {

grpc::Status ControlService::Retrain(grpc::ServerContext* context,
                                     const plumb::v1::RetrainRequest* request,
                                     plumb::v1::TrainerStatus* response) {
  InflightCalls::Scope scope;
  if (grpc::Status s = Admit(admission_, *context, &scope); !s.ok()) return s;
  const std::string& reason = request->reason();
  if (reason.size() > 200) {
    return grpc::Status(grpc::StatusCode::INVALID_ARGUMENT,
                        "reason is " + std::to_string(reason.size()) +
                            " bytes; at most 200 are accepted");
  }
  for (unsigned char c : reason) {
    if (c < 0x20 || c == 0x7f) {
      return grpc::Status(grpc::StatusCode::INVALID_ARGUMENT,
                          "reason contains a control character");
    }
  }
  loop_->RequestRetrain(reason.empty() ? "retrain requested" : "retrain requested: " + reason);
  FillStatus(response);
  return grpc::Status::OK;
}

}  // namespace plumb::online
