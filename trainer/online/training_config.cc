#include "trainer/online/training_config.h"

#include <cstdio>
#include <string_view>
#include <vector>

#include "trainer/objective.h"
#include "trainer/optimizer.h"

namespace plumb::online {
namespace {

std::string Num(double v) {
  char buf[32];
  std::snprintf(buf, sizeof buf, "%g", v);
  return buf;
}

std::string List(const std::vector<double>& values) {
  if (values.empty()) return "none";
  std::string out;
  for (double v : values) out += (out.empty() ? "" : ",") + Num(v);
  return out;
}

}  // namespace

store::TrainingConfig MakeTrainingConfig(std::string origin, const trainer::TrainOptions& o,
                                         uint32_t dim, uint32_t epochs, double replay_ratio,
                                         double holdout_fraction, std::vector<double> tune_betas) {
  store::TrainingConfig c;
  c.origin = std::move(origin);
  c.objective = std::string(trainer::ObjectiveName(o.objective));
  c.dim = dim;
  const bool cpr = o.objective == trainer::ObjectiveKind::kCpr;
  c.cpr_k = cpr ? o.cpr_k : 0;
  c.cpr_mix_k = cpr && o.cpr_mix_share > 0.0 ? o.cpr_mix_k : 0;
  c.cpr_mix_share = cpr ? o.cpr_mix_share : 0.0;
  c.beta = o.beta;
  c.optimizer = std::string(trainer::OptimizerName(o.optimizer));
  c.learning_rate = o.learning_rate;
  c.l2 = o.l2;
  c.batch_size = o.batch_size;
  c.epochs = epochs;
  c.replay_ratio = replay_ratio;
  c.holdout_fraction = holdout_fraction;
  c.seed = o.seed;
  c.tune_betas = std::move(tune_betas);
  return c;
}

std::string DescribeConfigChange(const store::VersionManifest& before,
                                 const store::TrainingConfig& now) {
  std::vector<std::string> diffs;
  auto text = [&](std::string_view name, const std::string& a, const std::string& b) {
    if (a != b) diffs.push_back(std::string(name) + " " + a + " -> " + b);
  };
  auto num = [&](std::string_view name, double a, double b) {
    // Stored as float32 in some paths (learning rate, l2): compare at that precision.
    if (static_cast<float>(a) != static_cast<float>(b)) {
      diffs.push_back(std::string(name) + " " + Num(a) + " -> " + Num(b));
    }
  };
  const store::TrainingConfig& was = before.training;
  if (!was.known()) {
    text("objective", before.objective, now.objective);
    num("dim", before.dim, now.dim);
  } else {
    text("objective", was.objective, now.objective);
    num("dim", was.dim, now.dim);
    num("k", was.cpr_k, now.cpr_k);
    num("k-mix size", was.cpr_mix_k, now.cpr_mix_k);
    num("k-mix share", was.cpr_mix_share, now.cpr_mix_share);
    if (was.tune_betas.empty() && now.tune_betas.empty()) {
      num("beta", was.beta, now.beta);
    } else {
      text("tuned betas", List(was.tune_betas), List(now.tune_betas));
    }
    text("optimizer", was.optimizer, now.optimizer);
    num("learning rate", was.learning_rate, now.learning_rate);
    num("l2", was.l2, now.l2);
    num("batch size", was.batch_size, now.batch_size);
    num("epochs", was.epochs, now.epochs);
    num("seed", static_cast<double>(was.seed), static_cast<double>(now.seed));
    num("training window (ms)", static_cast<double>(was.training_window_ms),
        static_cast<double>(now.training_window_ms));
  }
  std::string out;
  for (const std::string& d : diffs) out += (out.empty() ? "" : ", ") + d;
  return out;
}

std::string FormatTrainingConfig(const store::TrainingConfig& c) {
  if (!c.known()) return "unrecorded";
  std::string s = c.objective;
  if (c.objective == "cpr") {
    s += " k=" + std::to_string(c.cpr_k);
    if (c.cpr_mix_share > 0.0) {
      s += " k" + std::to_string(c.cpr_mix_k) + "-share=" + Num(c.cpr_mix_share);
    }
  }
  s += " beta=" + Num(c.beta);
  if (!c.tune_betas.empty()) s += " (tuned from " + List(c.tune_betas) + ")";
  s += " dim=" + std::to_string(c.dim) + " " + c.optimizer + " lr=" + Num(c.learning_rate) +
       " l2=" + Num(c.l2) + " batch=" + std::to_string(c.batch_size) +
       " epochs=" + std::to_string(c.epochs) + " seed=" + std::to_string(c.seed);
  if (c.origin == "online") s += " replay=" + Num(c.replay_ratio);
  if (c.holdout_fraction > 0.0) s += " holdout=" + Num(c.holdout_fraction);
  if (c.training_window_ms > 0) {
    s += " window=" + Num(static_cast<double>(c.training_window_ms) / 3'600'000.0) + "h";
  }
  return s;
}

std::vector<store::TuneRecord> MakeTuneRecords(const std::vector<trainer::TuneRow>& rows) {
  std::vector<store::TuneRecord> out;
  out.reserve(rows.size());
  for (const trainer::TuneRow& row : rows) {
    store::TuneRecord rec;
    rec.beta = row.candidate.beta;
    rec.cpr_mix_share = row.candidate.cpr_mix_share;
    rec.recall = row.scores.recall;
    rec.ndcg = row.scores.ndcg;
    rec.arp = row.scores.arp;
    rec.shift = row.scores.shift.shift;
    rec.shift_distance = row.scores.shift.distance;
    rec.standard_error = row.standard_error;
    rec.near_tie = row.near_tie;
    rec.chosen = row.chosen;
    out.push_back(rec);
  }
  return out;
}

}  // namespace plumb::online
