#include "trainer/online/refit.h"

#include <spdlog/spdlog.h>

#include <algorithm>
#include <chrono>
#include <limits>

#include "core/thread_priority.h"

namespace plumb::online {
namespace {

// Lowers the calling thread's CPU priority by 10 below the loop's (threads it creates inherit
// it). Best effort: a failure only means the refit competes at the loop's priority.
void LowerThreadPriority() { LowerThisThreadsPriority(std::min(19, ThisThreadsNiceness() + 10)); }

}  // namespace

Refitter::~Refitter() { Cancel(); }

Status Refitter::Start(RefitJob job) {
  if (thread_.joinable()) return Status::FailedPrecondition("a refit is already running");
  cancel_ = false;
  done_ = false;
  thread_ = std::thread([this, job = std::move(job)]() mutable { Run(std::move(job)); });
  return Status::Ok();
}

bool Refitter::Poll(RefitResult* out) {
  if (!thread_.joinable() || !done_.load(std::memory_order_acquire)) return false;
  thread_.join();
  std::lock_guard<std::mutex> lock(mu_);
  *out = std::move(result_);
  result_ = RefitResult();
  return true;
}

void Refitter::Cancel() {
  if (!thread_.joinable()) return;
  cancel_ = true;
  thread_.join();
  std::lock_guard<std::mutex> lock(mu_);
  result_ = RefitResult();
}

void Refitter::Run(RefitJob job) {
  LowerThreadPriority();
  const auto started = std::chrono::steady_clock::now();
  RefitResult r;
  r.snapshot_pairs = job.pairs.size();
  r.cursor = job.cursor;
  r.reason = job.reason;
  auto finish = [&](Status s) {
    r.status = std::move(s);
    r.seconds = std::chrono::duration<double>(std::chrono::steady_clock::now() - started).count();
    std::lock_guard<std::mutex> lock(mu_);
    result_ = std::move(r);
    done_.store(true, std::memory_order_release);
  };
  trainer::Interactions data;
  Status s = trainer::Interactions::Build(job.pairs, job.num_users, job.num_items, &data);
  job.pairs.clear();
  job.pairs.shrink_to_fit();
  if (!s.ok()) return finish(s);
  r.beta = job.options.beta;
  if (!job.tune_betas.empty()) {
    const trainer::ValidationSample sample =
        trainer::BuildValidationSample(data, job.validation, std::numeric_limits<size_t>::max());
    if (sample.effective_pairs >= job.min_effective_pairs) {
      std::vector<trainer::TuneCandidate> candidates;
      for (double b : job.tune_betas) candidates.push_back({b, job.options.cpr_mix_share});
      trainer::TuneOptions topt;
      topt.dim = job.dim;
      topt.epochs = job.epochs;
      topt.k = job.validation_k;
      trainer::TuneResult tuned;
      s = trainer::Tune(
          data, sample, job.options, candidates, topt,
          [this](const trainer::TuneRow&, const trainer::Embeddings&) {
            return !cancel_.load(std::memory_order_relaxed);
          },
          &tuned);
      if (!s.ok()) return finish(s);
      r.tuned = true;
      r.tune = std::move(tuned.report);
      r.beta = r.tune.rows[r.tune.chosen].candidate.beta;
      r.model = std::move(tuned.model);
      r.optimizer = std::move(tuned.optimizer);
      return finish(Status::Ok());
    }
  }
  s = trainer::Embeddings::Create(job.dim, data.num_users(), data.num_items(), job.options.seed,
                                  &r.model);
  if (!s.ok()) return finish(s);
  std::unique_ptr<trainer::FitLoop> fit;
  s = trainer::FitLoop::Create(job.options, &r.model, &data, &fit);
  if (!s.ok()) return finish(s);
  s = fit->RunEpochs(job.epochs, [&](const trainer::FitProgress& p) {
    r.last_loss = p.mean_loss;
    return !cancel_.load(std::memory_order_relaxed);
  });
  if (!s.ok()) return finish(s);
  if (cancel_.load()) return finish(Status::Aborted("refit cancelled"));
  if (!r.model.AllFinite()) {
    return finish(
        Status::Aborted("refit diverged (non-finite values); try a smaller "
                        "learning rate"));
  }
  r.optimizer = fit->ReleaseOptimizer();
  finish(Status::Ok());
}

}  // namespace plumb::online
