#include "trainer/trainer.h"

#include <atomic>
#include <chrono>
#include <cmath>
#include <string>
#include <thread>

namespace plumb::trainer {

namespace {

double SecondsSince(std::chrono::steady_clock::time_point start) {
  return std::chrono::duration<double>(std::chrono::steady_clock::now() - start).count();
}

}  // namespace

Status ValidateTrainOptions(const TrainOptions& o) {
  auto bad = [](const std::string& what) { return Status::InvalidArgument(what); };
  if (o.objective == ObjectiveKind::kCpr) {
    if (o.cpr_k < 2 || o.cpr_k > kMaxSampleSlots) {
      return bad("cpr_k must be in 2.." + std::to_string(kMaxSampleSlots));
    }
    if (!(o.cpr_mix_share >= 0.0 && o.cpr_mix_share <= 1.0)) {
      return bad("cpr_mix_share must be in [0, 1]");
    }
    if (o.cpr_mix_share > 0.0 && (o.cpr_mix_k < 2 || o.cpr_mix_k > kMaxSampleSlots)) {
      return bad("cpr_mix_k must be in 2.." + std::to_string(kMaxSampleSlots));
    }
    if (o.cpr_max_attempts == 0) return bad("cpr_max_attempts must be > 0");
  }
  if (o.objective == ObjectiveKind::kBce &&
      (o.bce_negatives < 1 || o.bce_negatives > kMaxSampleSlots)) {
    return bad("bce_negatives must be in 1.." + std::to_string(kMaxSampleSlots));
  }
  if (!(o.beta >= 1.0 && o.beta <= 1000.0)) return bad("beta must be in [1, 1000]");
  if (!(std::isfinite(o.learning_rate) && o.learning_rate > 0.0f)) {
    return bad("learning_rate must be finite and > 0");
  }
  if (!(std::isfinite(o.l2) && o.l2 >= 0.0f)) return bad("l2 must be finite and >= 0");
  if (o.batch_size == 0 || o.batch_size > (1u << 24)) return bad("batch_size must be in 1..2^24");
  if (o.threads == 0 || o.threads > 256) return bad("threads must be in 1..256");
  // Candidate buffers hold beta * batch_size samples per thread.
  if (o.beta * o.batch_size > static_cast<double>(1u << 24)) {
    return bad("beta x batch_size must be at most 16777216 candidate samples");
  }
  return Status::Ok();
}

struct FitLoop::Worker {
  Worker(const Sampler* sampler, const Objective* objective, double beta)
      : dynamic(sampler, objective, beta) {}
  DynamicSampler dynamic;
  Rng rng;
  RowGradients grads;
  std::vector<Sample> batch;
  // Results of the current run.
  uint64_t samples = 0;
  uint64_t positives = 0;
  double loss_sum = 0.0;
  Status status;
};

struct FitLoop::Totals {
  uint64_t samples = 0;
  uint64_t positives = 0;
  double loss_sum = 0.0;
  double seconds = 0.0;
};

FitLoop::FitLoop(const TrainOptions& options, Embeddings* model, const Interactions* data)
    : options_(options), model_(model), data_(data), step_rng_(mix_seed(options.seed, ~0ULL)) {}

FitLoop::~FitLoop() = default;

Status FitLoop::Create(const TrainOptions& options, Embeddings* model, const Interactions* data,
                       std::unique_ptr<FitLoop>* out) {
  PLUMB_RETURN_IF_ERROR(ValidateTrainOptions(options));
  if (model == nullptr || data == nullptr) {
    return Status::InvalidArgument("FitLoop needs a model and interactions");
  }
  if (model->dim() == 0) return Status::InvalidArgument("the model has no dimension");
  std::unique_ptr<FitLoop> loop(new FitLoop(options, model, data));
  loop->objective_ = MakeObjective(options.objective);
  PLUMB_RETURN_IF_ERROR(MakeOptimizer(options.optimizer, options.learning_rate, &loop->optimizer_));
  if (options.objective == ObjectiveKind::kCpr) {
    CprSamplerOptions so;
    so.k = options.cpr_k;
    so.mix_k = options.cpr_mix_k;
    so.mix_share = options.cpr_mix_share;
    so.max_attempts = options.cpr_max_attempts;
    std::unique_ptr<CprSampler> s;
    PLUMB_RETURN_IF_ERROR(CprSampler::Create(data, so, &s));
    loop->sampler_ = std::move(s);
  } else {
    NegativeSamplerOptions so;
    so.num_negatives = options.objective == ObjectiveKind::kBce ? options.bce_negatives : 1;
    std::unique_ptr<NegativeSampler> s;
    PLUMB_RETURN_IF_ERROR(NegativeSampler::Create(data, so, &s));
    loop->sampler_ = std::move(s);
  }
  for (uint32_t t = 0; t < options.threads; ++t) {
    loop->workers_.push_back(
        std::make_unique<Worker>(loop->sampler_.get(), loop->objective_.get(), options.beta));
  }
  *out = std::move(loop);
  return Status::Ok();
}

Status FitLoop::ReplaceOptimizer(std::unique_ptr<Optimizer> optimizer) {
  if (optimizer == nullptr || optimizer->kind() != options_.optimizer) {
    return Status::InvalidArgument("replacement optimiser missing or of another kind");
  }
  optimizer_ = std::move(optimizer);
  return Status::Ok();
}

Status FitLoop::Sync() {
  PLUMB_RETURN_IF_ERROR(model_->Grow(data_->num_users(), data_->num_items()));
  return optimizer_->Resize(*model_);
}

Status FitLoop::Prepare() {
  PLUMB_RETURN_IF_ERROR(Sync());
  return sampler_->CheckData();
}

Status FitLoop::RunParallel(uint64_t positives_budget, uint64_t batches_budget, Totals* totals) {
  const uint32_t T = options_.threads;
  const uint64_t round = round_++;
  // Expected positives per sample, to size the last batch of an epoch.
  double per_sample = 1.0;
  if (options_.objective == ObjectiveKind::kCpr) {
    per_sample = options_.cpr_k * (1.0 - options_.cpr_mix_share) +
                 options_.cpr_mix_k * options_.cpr_mix_share;
  }
  std::atomic<bool> failed{false};
  auto run = [&](uint32_t t) {
    Worker& w = *workers_[t];
    w.rng.Seed(mix_seed(options_.seed, round, t));
    w.samples = w.positives = 0;
    w.loss_sum = 0.0;
    w.status = Status::Ok();
    // Even split; the first threads take the remainder.
    const uint64_t pos_quota = positives_budget / T + (t < positives_budget % T ? 1 : 0);
    const uint64_t batch_quota = batches_budget / T + (t < batches_budget % T ? 1 : 0);
    uint64_t batches = 0;
    while (!failed.load(std::memory_order_relaxed)) {
      uint32_t n = options_.batch_size;
      if (positives_budget > 0) {
        if (w.positives >= pos_quota) break;
        const double remaining = static_cast<double>(pos_quota - w.positives);
        n = static_cast<uint32_t>(std::min<double>(n, std::ceil(remaining / per_sample)));
      } else if (batches >= batch_quota) {
        break;
      }
      w.batch.clear();
      Status s = w.dynamic.DrawBatch(*model_, n, &w.rng, &w.batch);
      if (!s.ok()) {
        w.status = std::move(s);
        failed.store(true, std::memory_order_relaxed);
        break;
      }
      for (const Sample& sample : w.batch) {
        w.loss_sum += objective_->Step(model_, optimizer_.get(), sample, options_.l2, &w.grads);
        w.positives += objective_->Positives(sample);
      }
      w.samples += w.batch.size();
      ++batches;
    }
  };
  const auto start = std::chrono::steady_clock::now();
  if (T == 1) {
    run(0);
  } else {
    std::vector<std::thread> threads;
    threads.reserve(T);
    for (uint32_t t = 0; t < T; ++t) threads.emplace_back(run, t);
    for (auto& th : threads) th.join();
  }
  totals->seconds = SecondsSince(start);
  for (const auto& w : workers_) {
    if (!w->status.ok()) return w->status;
    totals->samples += w->samples;
    totals->positives += w->positives;
    totals->loss_sum += w->loss_sum;
  }
  return Status::Ok();
}

namespace {

FitProgress MakeProgress(uint64_t samples, uint64_t positives, double loss_sum, double seconds) {
  FitProgress p;
  p.samples = samples;
  p.positives = positives;
  p.mean_loss = samples > 0 ? loss_sum / static_cast<double>(samples) : 0.0;
  p.seconds = seconds;
  p.positives_per_second = seconds > 0.0 ? static_cast<double>(positives) / seconds : 0.0;
  return p;
}

}  // namespace

Status FitLoop::RunEpochs(uint32_t epochs, const ProgressCallback& progress) {
  PLUMB_RETURN_IF_ERROR(Prepare());
  for (uint32_t e = 1; e <= epochs; ++e) {
    Totals totals;
    PLUMB_RETURN_IF_ERROR(RunParallel(data_->size(), 0, &totals));
    if (progress) {
      FitProgress p =
          MakeProgress(totals.samples, totals.positives, totals.loss_sum, totals.seconds);
      p.epoch = e;
      p.epochs = epochs;
      if (!progress(p)) break;
    }
  }
  return Status::Ok();
}

Status FitLoop::RunBatches(uint64_t batches, const ProgressCallback& progress) {
  PLUMB_RETURN_IF_ERROR(Prepare());
  if (batches == 0) return Status::Ok();
  Totals totals;
  PLUMB_RETURN_IF_ERROR(RunParallel(0, batches, &totals));
  if (progress) {
    progress(MakeProgress(totals.samples, totals.positives, totals.loss_sum, totals.seconds));
  }
  return Status::Ok();
}

Status FitLoop::StepBatch(std::span<const uint64_t> new_pairs, uint64_t replay_samples,
                          StepStats* stats) {
  for (uint64_t idx : new_pairs) {
    if (idx >= data_->size()) {
      return Status::InvalidArgument("new interaction #" + std::to_string(idx) +
                                     " does not exist (" + std::to_string(data_->size()) +
                                     " interactions)");
    }
  }
  PLUMB_RETURN_IF_ERROR(Prepare());
  Worker& w = *workers_[0];
  w.batch.clear();
  PLUMB_RETURN_IF_ERROR(w.dynamic.DrawAnchoredBatch(*model_, new_pairs, &step_rng_, &w.batch));
  // Replay in chunks of the batch size so hard-sample selection works on bounded buffers.
  for (uint64_t left = replay_samples; left > 0;) {
    const uint32_t n = static_cast<uint32_t>(std::min<uint64_t>(left, options_.batch_size));
    PLUMB_RETURN_IF_ERROR(w.dynamic.DrawBatch(*model_, n, &step_rng_, &w.batch));
    left -= n;
  }
  StepStats st;
  double loss_sum = 0.0;
  for (const Sample& sample : w.batch) {
    loss_sum += objective_->Step(model_, optimizer_.get(), sample, options_.l2, &w.grads);
    st.positives += objective_->Positives(sample);
  }
  st.samples = w.batch.size();
  st.mean_loss = st.samples > 0 ? loss_sum / static_cast<double>(st.samples) : 0.0;
  if (stats != nullptr) *stats = st;
  return Status::Ok();
}

}  // namespace plumb::trainer
