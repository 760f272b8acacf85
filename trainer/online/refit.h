// Refitter: a full fit of the whole training history in the background, the way `plumb fit`
// trains offline (fresh embeddings, fresh optimiser state, E epochs over every pair), while the
// online loop keeps consuming the stream and stepping the live model.
//
// Why it exists: an incremental trainer that only ever steps on new pairs plus a replay
// sample ends somewhere else than a batch fit of the same pairs when the stream is not
// stationary — early pairs are replayed far more often than late ones, Adagrad's accumulators
// of early rows only grow, and rows that appear late get few updates (measured per suspect by
// bench/quality/online_vs_offline.py; see the README). A refit from the whole history at a
// bounded cadence puts the live model back where a batch fit would be; the incremental steps
// in between keep it fresh.
//
// The job is a copy of the training pairs (the first N pairs in their insertion order: pair
// indexes are stable, so row indexes of the result match the live model's), so the refit
// shares no mutable state with the training thread. Its threads run at a lower CPU priority
// (nice +10) than the process, so that serving on the same host is disturbed less.
//
// Thread safety: Start, Poll, Cancel and running() are called from one thread (the training
// thread); the fit runs on the Refitter's own thread.
#pragma once

#include <atomic>
#include <cstdint>
#include <memory>
#include <mutex>
#include <string>
#include <thread>
#include <vector>

#include "core/status.h"
#include "trainer/embeddings.h"
#include "trainer/interactions.h"
#include "trainer/optimizer.h"
#include "trainer/trainer.h"
#include "trainer/tuner.h"

namespace plumb::online {

struct RefitJob {
  std::vector<trainer::Pair> pairs;  // training pairs [0, pairs.size()) of the live state
  uint32_t num_users = 0;            // index space at the snapshot
  uint32_t num_items = 0;
  trainer::TrainOptions options;  // objective, k, beta, optimiser, lr, l2, threads, seed
  uint32_t dim = 64;
  uint32_t epochs = 20;
  uint64_t cursor = 0;  // log sequence the pairs cover (for the manifest)
  std::string reason;   // why it was started (status, logs, manifest)
  // Non-empty: choose beta among these on a debiased validation sample of `validation`
  // (trainer/tuner.h) instead of fitting options.beta; falls back to options.beta when the
  // sample is too small (effective size below min_effective_pairs).
  std::vector<double> tune_betas;
  std::vector<trainer::Pair> validation;
  uint32_t validation_k = 20;
  double min_effective_pairs = 30.0;
};

struct RefitResult {
  Status status;  // not ok: the fit failed (or was cancelled) and nothing else is set
  trainer::Embeddings model;
  std::unique_ptr<trainer::Optimizer> optimizer;  // its state after the fit, to continue with
  uint64_t snapshot_pairs = 0;
  uint64_t cursor = 0;
  std::string reason;
  double seconds = 0.0;
  double last_loss = 0.0;
  bool tuned = false;  // the tuner chose beta (then `tune` holds its table)
  double beta = 0.0;   // the beta the model was fitted with
  trainer::TuneReport tune;
};

class Refitter {
 public:
  Refitter() = default;
  Refitter(const Refitter&) = delete;
  Refitter& operator=(const Refitter&) = delete;
  ~Refitter();  // cancels and joins

  // Starts a fit of `job` on a background thread. FailedPrecondition if one is running or
  // its result has not been collected by Poll.
  Status Start(RefitJob job);

  // Whether a fit has been started and its result not yet collected.
  bool running() const { return thread_.joinable(); }

  // If the fit has finished, moves its result into *out, joins the thread and returns true.
  bool Poll(RefitResult* out);

  // Asks a running fit to stop after its current epoch and waits for it; the result is
  // discarded. Idempotent.
  void Cancel();

 private:
  void Run(RefitJob job);

  std::thread thread_;
  std::atomic<bool> cancel_{false};
  std::atomic<bool> done_{false};
  std::mutex mu_;
  RefitResult result_;  // guarded by mu_ until done_
};

}  // namespace plumb::online
