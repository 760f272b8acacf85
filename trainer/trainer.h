// FitLoop: trains an Embeddings model on Interactions with one objective, one sampler
// (wrapped in a DynamicSampler) and one optimiser, on T threads.
//
// Threads update rows without locks, Hogwild-style (Recht, Re, Wright & Niu, 2011): each
// sample touches a handful of the model's rows, collisions between threads are rare, and
// the occasional lost or mixed update does not hurt SGD. This is common practice for sparse
// SGD (fastText and word2vec train the same way). The price: with T > 1 results depend on
// thread timing; with T = 1 and a fixed seed two runs give bit-identical embeddings.
//
// An epoch uses as many observed interactions as there are training pairs (a CPR sample of
// k uses k, a BPR or BCE sample one), split evenly between threads. The mini-batch is the
// unit of hard-sample selection: a thread draws ceil(beta B) candidates, keeps the B
// hardest and steps on them one by one (per-sample updates, as usual for sparse SGD).
#pragma once

#include <cstdint>
#include <functional>
#include <memory>
#include <span>
#include <string>
#include <vector>

#include "core/status.h"
#include "trainer/dynamic_sampler.h"
#include "trainer/embeddings.h"
#include "trainer/interactions.h"
#include "trainer/objective.h"
#include "trainer/optimizer.h"
#include "trainer/rng.h"
#include "trainer/sampler.h"

namespace plumb::trainer {

struct TrainOptions {
  ObjectiveKind objective = ObjectiveKind::kCpr;
  // CPR sample size, and the share of samples of size cpr_mix_k mixed in (0 = none).
  uint32_t cpr_k = 2;
  uint32_t cpr_mix_k = kCprMixK;
  double cpr_mix_share = 0.0;
  // Whole-sample attempts before the CPR sampler reports the data as too dense.
  uint32_t cpr_max_attempts = 2000;
  // Negatives per positive for BCE (BPR always uses one).
  uint32_t bce_negatives = 4;
  // Dynamic sampling: candidates drawn per kept sample (1 = plain random).
  double beta = kDefaultBeta;
  OptimizerKind optimizer = OptimizerKind::kAdagrad;
  float learning_rate = 0.05f;
  // L2 regularisation strength on the rows each step touches.
  float l2 = 1e-4f;
  // Samples kept per mini-batch.
  uint32_t batch_size = 1024;
  uint32_t threads = 1;
  uint64_t seed = 1;
};

// Checks ranges and combinations; the error names the offending option.
Status ValidateTrainOptions(const TrainOptions& options);

// What the progress callback is told after each epoch (or each RunBatches call).
struct FitProgress {
  uint32_t epoch = 0;      // 1-based epoch within the current RunEpochs call; 0 for RunBatches
  uint32_t epochs = 0;     // epochs requested (0 for RunBatches)
  uint64_t samples = 0;    // samples trained in this epoch
  uint64_t positives = 0;  // observed interactions used in this epoch
  double mean_loss = 0.0;  // mean sample loss over the epoch (before each update)
  double positives_per_second = 0.0;
  double seconds = 0.0;  // wall time of this epoch
};

// Called on the thread that called RunEpochs/RunBatches, between epochs (never during
// one). Return false to stop after this epoch.
using ProgressCallback = std::function<bool(const FitProgress&)>;

// What one StepBatch did.
struct StepStats {
  uint64_t samples = 0;
  uint64_t positives = 0;
  double mean_loss = 0.0;
};

// Not thread-safe itself: one caller at a time drives a FitLoop (it runs its own worker
// threads inside RunEpochs/RunBatches). The model and data must not be touched by anyone
// else while a call runs; between calls the data may grow (online), and every call first
// grows the model and optimiser state to the data's shape.
class FitLoop {
 public:
  // `model` and `data` are not owned and must outlive the loop. The model must have a
  // dimension (Embeddings::Create or FromMatrices); it may have fewer rows than the data
  // (they are added on the next call).
  // Errors: InvalidArgument for bad options or a model without dimension.
  static Status Create(const TrainOptions& options, Embeddings* model, const Interactions* data,
                       std::unique_ptr<FitLoop>* out);

  FitLoop(const FitLoop&) = delete;
  FitLoop& operator=(const FitLoop&) = delete;
  ~FitLoop();

  // Runs `epochs` epochs on options.threads threads, calling `progress` (if set) after each.
  // Errors: those of the sampler (FailedPrecondition / ResourceExhausted when the data cannot
  // form samples; checked before any update, and again if it happens mid-epoch — the model
  // keeps the updates made so far), ResourceExhausted if growing the model fails.
  Status RunEpochs(uint32_t epochs, const ProgressCallback& progress = {});

  // Runs `batches` mini-batches in total, split between threads; `progress` is called once
  // at the end. Errors: as RunEpochs.
  Status RunBatches(uint64_t batches, const ProgressCallback& progress = {});

  // One online step, on the calling thread: one sample anchored on each new interaction
  // (data.pair(index) for each index in new_pairs; with beta > 1 the hardest of ceil(beta)
  // anchored candidates) plus replay_samples samples drawn from all history through the
  // dynamic sampler (beta applies), trained in one pass. Deterministic for a given seed and
  // call sequence. Errors: InvalidArgument for an index >= data.size(); sampler errors; no
  // update is made if drawing fails.
  Status StepBatch(std::span<const uint64_t> new_pairs, uint64_t replay_samples,
                   StepStats* stats = nullptr);

  // Grows the model and optimiser state to the data's current shape (every call above does
  // this first; exposed for callers that publish between steps).
  Status Sync();

  const TrainOptions& options() const { return options_; }
  const Objective& objective() const { return *objective_; }
  const Optimizer& optimizer() const { return *optimizer_; }

  // Hands the optimiser (with its per-row state) to the caller, e.g. to continue a
  // background refit's state in the live loop. The FitLoop must not be used afterwards.
  std::unique_ptr<Optimizer> ReleaseOptimizer() { return std::move(optimizer_); }

  // Continues with `optimizer` (and its per-row state) instead of the current one; the next
  // call grows it to the model's shape. InvalidArgument if it is null or of another kind
  // than options().optimizer.
  Status ReplaceOptimizer(std::unique_ptr<Optimizer> optimizer);

 private:
  struct Worker;
  struct Totals;
  FitLoop(const TrainOptions& options, Embeddings* model, const Interactions* data);
  Status Prepare();
  Status RunParallel(uint64_t positives_budget, uint64_t batches_budget, Totals* totals);

  TrainOptions options_;
  Embeddings* model_;
  const Interactions* data_;
  std::unique_ptr<Objective> objective_;
  std::unique_ptr<Optimizer> optimizer_;
  std::unique_ptr<Sampler> sampler_;
  std::vector<std::unique_ptr<Worker>> workers_;
  uint64_t round_ = 0;  // counts parallel runs so each gets fresh random streams
  Rng step_rng_;        // StepBatch's stream
};

}  // namespace plumb::trainer
