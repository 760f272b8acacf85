#include "store/records.h"

#include <cmath>

#include <google/protobuf/io/coded_stream.h>
#include <google/protobuf/io/zero_copy_stream_impl_lite.h>

#include "plumb/v1/storage.pb.h"

namespace plumb::store::records {

using plumb::v1::storage::StoredEvent;
using plumb::v1::storage::StoredManifest;

std::string EncodeEvent(const EventInput& event, int64_t received_ms) {
  StoredEvent stored;
  stored.set_user_id(event.user_id);
  stored.set_item_id(event.item_id);
  stored.set_timestamp_ms(event.timestamp_ms);
  stored.set_event_id(event.event_id);
  stored.set_weight(event.weight);
  stored.set_received_ms(received_ms);
  std::string out;
  stored.SerializeToString(&out);
  return out;
}

bool DecodeEvent(std::string_view value, uint64_t seq, Event* out, std::string* why) {
  StoredEvent stored;
  if (!stored.ParseFromArray(value.data(), static_cast<int>(value.size()))) {
    *why = "value does not parse as an event record";
    return false;
  }
  if (stored.user_id().empty() || stored.item_id().empty()) {
    *why = "record has no user or item id";
    return false;
  }
  if (stored.received_ms() <= 0) {
    *why = "record has no receive time (truncated?)";
    return false;
  }
  out->user_id = stored.user_id();
  out->item_id = stored.item_id();
  out->timestamp_ms = stored.timestamp_ms();
  out->event_id = stored.event_id();
  out->weight = stored.weight();
  out->seq = seq;
  out->received_ms = stored.received_ms();
  return true;
}

std::string EncodeManifest(const VersionManifest& manifest, uint32_t rows_per_block) {
  StoredManifest stored;
  stored.set_version(manifest.version);
  stored.set_created_ms(manifest.created_ms);
  stored.set_objective(manifest.objective);
  stored.set_events_seen(manifest.events_seen);
  stored.set_num_users(manifest.num_users);
  stored.set_num_items(manifest.num_items);
  stored.set_dim(manifest.dim);
  stored.set_rows_per_block(rows_per_block);
  stored.set_validation_recall(manifest.validation_recall);
  stored.set_validation_k(manifest.validation_k);
  stored.set_gate(static_cast<int32_t>(manifest.gate));
  stored.set_gate_reason(manifest.gate_reason);
  for (const auto& [name, value] : manifest.figures) (*stored.mutable_figures())[name] = value;
  stored.set_num_interactions(manifest.num_interactions);
  if (const TrainingConfig& t = manifest.training; t.known()) {
    auto* c = stored.mutable_training();
    c->set_origin(t.origin);
    c->set_objective(t.objective);
    c->set_dim(t.dim);
    c->set_cpr_k(t.cpr_k);
    c->set_cpr_mix_k(t.cpr_mix_k);
    c->set_cpr_mix_share(t.cpr_mix_share);
    c->set_beta(t.beta);
    c->set_optimizer(t.optimizer);
    c->set_learning_rate(t.learning_rate);
    c->set_l2(t.l2);
    c->set_batch_size(t.batch_size);
    c->set_epochs(t.epochs);
    c->set_replay_ratio(t.replay_ratio);
    c->set_holdout_fraction(t.holdout_fraction);
    c->set_seed(t.seed);
    c->set_refit_pairs(t.refit_pairs);
    for (double b : t.tune_betas) c->add_tune_betas(b);
    c->set_training_window_ms(t.training_window_ms);
  }
  for (double v : manifest.target_group_shares) stored.add_target_group_shares(v);
  for (double v : manifest.validation_group_shares) stored.add_validation_group_shares(v);
  stored.set_validation_shift(manifest.validation_shift);
  stored.set_validation_shift_distance(manifest.validation_shift_distance);
  for (const TuneRecord& r : manifest.tune) {
    auto* row = stored.add_tune();
    row->set_beta(r.beta);
    row->set_cpr_mix_share(r.cpr_mix_share);
    row->set_recall(r.recall);
    row->set_ndcg(r.ndcg);
    row->set_arp(r.arp);
    row->set_shift(r.shift);
    row->set_shift_distance(r.shift_distance);
    row->set_standard_error(r.standard_error);
    row->set_near_tie(r.near_tie);
    row->set_chosen(r.chosen);
  }
  stored.set_tune_reason(manifest.tune_reason);
  std::string out;
  // Deterministic so that the same manifest always yields the same bytes (map order).
  {
    google::protobuf::io::StringOutputStream stream(&out);
    google::protobuf::io::CodedOutputStream coded(&stream);
    coded.SetSerializationDeterministic(true);
    stored.SerializeToCodedStream(&coded);
  }
  return out;
}

bool DecodeManifest(std::string_view value, uint64_t version, VersionManifest* out,
                    uint32_t* rows_per_block, std::string* why) {
  StoredManifest stored;
  if (!stored.ParseFromArray(value.data(), static_cast<int>(value.size()))) {
    *why = "value does not parse as a manifest record";
    return false;
  }
  if (stored.version() != version) {
    *why = "record names version " + std::to_string(stored.version());
    return false;
  }
  if (stored.rows_per_block() == 0) {
    *why = "record has no block size";
    return false;
  }
  if (stored.dim() == 0 && (stored.num_users() > 0 || stored.num_items() > 0)) {
    *why = "record has rows but dimension 0";
    return false;
  }
  if (stored.created_ms() <= 0) {
    *why = "record has no creation time";
    return false;
  }
  if (stored.gate() < static_cast<int32_t>(GateOutcome::kUnspecified) ||
      stored.gate() > static_cast<int32_t>(GateOutcome::kSkipped)) {
    *why = "record has unknown gate outcome " + std::to_string(stored.gate());
    return false;
  }
  out->version = stored.version();
  out->created_ms = stored.created_ms();
  out->objective = stored.objective();
  out->events_seen = stored.events_seen();
  out->num_interactions = stored.num_interactions();
  out->num_users = stored.num_users();
  out->num_items = stored.num_items();
  out->dim = stored.dim();
  out->validation_recall = stored.validation_recall();
  out->validation_k = stored.validation_k();
  out->gate = static_cast<GateOutcome>(stored.gate());
  out->gate_reason = stored.gate_reason();
  out->figures.clear();
  for (const auto& [name, figure] : stored.figures()) out->figures[name] = figure;
  out->training = TrainingConfig();
  if (stored.has_training()) {
    const auto& c = stored.training();
    TrainingConfig& t = out->training;
    t.origin = c.origin();
    t.objective = c.objective();
    t.dim = c.dim();
    t.cpr_k = c.cpr_k();
    t.cpr_mix_k = c.cpr_mix_k();
    t.cpr_mix_share = c.cpr_mix_share();
    t.beta = c.beta();
    t.optimizer = c.optimizer();
    t.learning_rate = c.learning_rate();
    t.l2 = c.l2();
    t.batch_size = c.batch_size();
    t.epochs = c.epochs();
    t.replay_ratio = c.replay_ratio();
    t.holdout_fraction = c.holdout_fraction();
    t.seed = c.seed();
    t.refit_pairs = c.refit_pairs();
    t.tune_betas.assign(c.tune_betas().begin(), c.tune_betas().end());
    t.training_window_ms = c.training_window_ms();
  }
  out->target_group_shares.assign(stored.target_group_shares().begin(),
                                  stored.target_group_shares().end());
  out->validation_group_shares.assign(stored.validation_group_shares().begin(),
                                      stored.validation_group_shares().end());
  // Written before the field existed: 0 on the wire means "not measured".
  const bool measured = !out->validation_group_shares.empty();
  out->validation_shift = measured ? stored.validation_shift() : std::nan("");
  out->validation_shift_distance = measured ? stored.validation_shift_distance() : std::nan("");
  out->tune.clear();
  for (const auto& row : stored.tune()) {
    TuneRecord r;
    r.beta = row.beta();
    r.cpr_mix_share = row.cpr_mix_share();
    r.recall = row.recall();
    r.ndcg = row.ndcg();
    r.arp = row.arp();
    r.shift = row.shift();
    r.shift_distance = row.shift_distance();
    r.standard_error = row.standard_error();
    r.near_tie = row.near_tie();
    r.chosen = row.chosen();
    out->tune.push_back(r);
  }
  out->tune_reason = stored.tune_reason();
  *rows_per_block = stored.rows_per_block();
  return true;
}

std::string EncodePairHistory(const PairHistory& record) {
  plumb::v1::storage::StoredPairHistory stored;
  stored.set_count(record.count);
  stored.set_first_seq(record.first_seq);
  stored.set_last_ms(record.last_ms);
  std::string out;
  stored.SerializeToString(&out);
  return out;
}

bool DecodePairHistory(std::string_view value, PairHistory* out) {
  plumb::v1::storage::StoredPairHistory stored;
  if (!stored.ParseFromArray(value.data(), static_cast<int>(value.size()))) return false;
  if (stored.count() == 0) return false;
  out->count = stored.count();
  out->first_seq = stored.first_seq();
  out->last_ms = stored.last_ms();
  return true;
}

std::string EncodeRetention(const LogStats& totals) {
  plumb::v1::storage::StoredRetention stored;
  stored.set_removed_events(totals.removed_events);
  stored.set_removed_bytes(totals.removed_bytes);
  stored.set_folded_through(totals.folded_through);
  stored.set_folded_watermark_ms(totals.folded_watermark_ms);
  stored.set_pairs(totals.history_pairs);
  stored.set_passes(totals.retention_passes);
  stored.set_last_pass_ms(totals.last_retention_ms);
  std::string out;
  stored.SerializeToString(&out);
  return out;
}

bool DecodeRetention(std::string_view value, LogStats* totals) {
  plumb::v1::storage::StoredRetention stored;
  if (!stored.ParseFromArray(value.data(), static_cast<int>(value.size()))) return false;
  totals->removed_events = stored.removed_events();
  totals->removed_bytes = stored.removed_bytes();
  totals->folded_through = stored.folded_through();
  totals->folded_watermark_ms = stored.folded_watermark_ms();
  totals->history_pairs = stored.pairs();
  totals->retention_passes = stored.passes();
  totals->last_retention_ms = stored.last_pass_ms();
  return true;
}

std::string EncodeAvailability(uint64_t generation, uint64_t withdrawn) {
  plumb::v1::storage::StoredAvailability stored;
  stored.set_generation(generation);
  stored.set_withdrawn(withdrawn);
  std::string out;
  stored.SerializeToString(&out);
  return out;
}

bool DecodeAvailability(std::string_view value, uint64_t* generation, uint64_t* withdrawn) {
  plumb::v1::storage::StoredAvailability stored;
  if (!stored.ParseFromArray(value.data(), static_cast<int>(value.size()))) return false;
  *generation = stored.generation();
  *withdrawn = stored.withdrawn();
  return true;
}

}  // namespace plumb::store::records

namespace plumb::store {

std::string_view GateOutcomeName(GateOutcome gate, std::string_view unspecified) {
  switch (gate) {
    case GateOutcome::kPassed:
      return "passed";
    case GateOutcome::kFailed:
      return "failed";
    case GateOutcome::kSkipped:
      return "skipped";
    case GateOutcome::kUnspecified:
      break;
  }
  return unspecified;
}

}  // namespace plumb::store
