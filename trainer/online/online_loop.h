// OnlineLoop: plumb-train's training thread. It tails the store's event log after its cursor,
// folds new events into the in-memory training state (id dictionaries, interaction sets,
// item degrees, a held-out validation stream), steps the configured objective on
// mini-batches of new events mixed with a replay sample of history, and every publish
// interval builds a candidate version, gates it, and commits it together with the training
// state and the cursor in one atomic store write.
//
// Refits: in the background, at a bounded cadence, the loop also fits the whole history
// from scratch the way `plumb fit` does (trainer/online/refit.h says why). When a refit ends
// the loop continues from its embeddings and optimiser state, replays the pairs that arrived
// meanwhile as incremental steps, and publishes the result as an ordinary gated candidate.
// A refit starts when (a) the training pairs grew by refit_min_growth since the last one and
// the previous refit's cool-down has passed (a refit that took T seconds is followed by at
// least T (1 / refit_max_duty - 1) seconds without one), (b) the training configuration
// differs from the one the newest version was trained with (then nothing is published
// until the rebuild with the new configuration lands: the old active version stays in charge,
// and status says why), or (c) RequestRetrain() asks for one.
//
// Thread safety: Start/Stop from one thread; every other method may be called from any
// thread (the gRPC services call them) while the loop runs.
#pragma once

#include <cstdint>
#include <memory>
#include <string>
#include <vector>

#include "core/status.h"
#include "store/store.h"
#include "trainer/train_settings.h"

namespace plumb::online {

// The training choices (objective, optimizer, cpr_k, cpr_k3_share, beta, learning_rate, l2,
// batch_size, seed) are the TrainSettings every trainer shares; `threads` are those of a
// background refit (the incremental steps run on the training thread).
struct OnlineOptions : trainer::TrainSettings {
  uint32_t dim = 64;
  double replay_ratio = 3.0;  // replayed history interactions per new interaction
  // Once the log is consumed, keep training on replayed history for about this many passes
  // over the training pairs (counted in samples), so a quiet stream still converges; what
  // it learns is published at the next publish interval. 0 = no idle training.
  double idle_replay_passes = 10.0;
  // Background refits (see the file comment). refit = false: incremental steps only.
  bool refit = true;
  uint32_t refit_epochs = 20;      // epochs of a refit, as `plumb fit --epochs`
  double refit_min_growth = 0.01;  // new training pairs, as a share of the last refit's
  double refit_max_duty = 0.5;     // share of time refits may run on average, in (0, 1]
  // Rebuilds choose beta from these on a debiased validation split (trainer/tuner.h): the
  // first refit with enough validation data, every requested or configuration-change
  // rebuild, and a refit once the training pairs doubled since the last choice. Refits in
  // between keep the chosen beta. tune = false (or an empty list): beta is fixed.
  bool tune = true;
  // Train only on pairs whose latest event is within this many ms of the newest event seen (0:
  // all history). Expired pairs leave training at the next refit (or publish, without
  // refits); training_state.h has the rule.
  int64_t training_window_ms = 0;
  std::vector<double> tune_betas = {1.0, 2.0, 3.0, 5.0};
  double holdout_fraction = 0.02;  // share of (user,item) pairs held out for validation
  uint64_t publish_every_events = 20000;
  double publish_every_seconds = 30.0;
  uint32_t min_train_pairs = 100;  // no version before this many training pairs
  uint32_t gate_k = 20;
  double gate_tolerance = 0.02;  // allowed absolute drop of validation Recall@K
  double gate_max_row_norm = 100.0;
  bool auto_activate = true;  // initial value; persisted in the store's meta
  // Auto-activate only candidates that passed a real comparison (not "skipped" ones).
  bool require_gate = false;
};

// Read-only view of what the loop is doing, for GetStatus and metrics.
struct OnlineStatus {
  uint64_t active_version = 0;
  uint64_t last_sequence = 0;
  uint64_t trained_sequence = 0;
  bool auto_activate = true;
  std::string objective;
  uint32_t num_users = 0;
  uint32_t num_items = 0;
  uint64_t events_trained = 0;
  uint64_t samples_trained = 0;
  double last_loss = 0.0;
  double active_validation_recall = 0.0;
  double candidate_validation_recall = 0.0;
  uint64_t candidates_passed = 0;
  uint64_t candidates_failed = 0;
  uint64_t candidates_skipped = 0;
  // Why automatic activation is off (empty when on), e.g. after a manual activation.
  std::string auto_activate_reason;
  // The configuration the loop trains with, and what the published versions were trained
  // with when that differs (publishing waits for the rebuild; empty otherwise).
  store::TrainingConfig training;
  std::string pending_config_change;
  // Refits.
  bool refit_running = false;
  std::string refit_reason;  // of the running refit, or of the last one
  uint64_t refits_completed = 0;
  uint64_t refits_failed = 0;
  double last_refit_seconds = 0.0;
  uint64_t refit_pairs = 0;  // training pairs covered by the model's last refit
  uint64_t train_pairs = 0;  // training pairs now
  // The last choice of beta by the tuner (empty reason: never tuned).
  double tuned_beta = 0.0;
  std::string tune_reason;
  uint64_t pairs_expired = 0;  // training pairs dropped by the training window since start
  int64_t oldest_untrained_received_ms = 0;  // 0 when caught up
  int64_t last_publish_ms = 0;
  // Caught up with the log, idle replay spent, and everything learned is published.
  bool idle = false;
  // The canary (version 0: none).
  store::Canary canary;
};

class OnlineLoop {
 public:
  // Rebuilds the training state from the store (replaying the event log up to the durable
  // cursor, warm-starting embeddings from the newest kept version). `store` must be a
  // primary and must outlive the loop.
  static Status Create(store::Store* store, const OnlineOptions& options,
                       std::unique_ptr<OnlineLoop>* out);

  OnlineLoop(const OnlineLoop&) = delete;
  OnlineLoop& operator=(const OnlineLoop&) = delete;
  ~OnlineLoop();  // calls Stop()

  // Starts the training thread at niceness `nice` (core/thread_priority.h; 0: the caller's),
  // which the refits it starts inherit (they add 10 more).
  void Start(int nice = 0);
  // Finishes the mini-batch in hand and stops; publishes nothing half-done. Idempotent.
  void Stop();

  // Wakes the loop: new events were appended (the loop also polls).
  void NotifyAppended();

  // Forces a publish at the next opportunity (tests, and the end of a stream in demos).
  void RequestPublish();

  // Starts a refit of the whole history now (unless one is running; then it is recorded
  // and started when that one ends). Its result is published as a gated candidate.
  void RequestRetrain(const std::string& reason);

  OnlineStatus status() const;

  // Promotion or rollback: makes a kept version active and pauses automatic activation
  // (an operator's choice holds until SetAutoActivate(true); status says why it is off).
  // NotFound / FailedPrecondition as Store::Activate. `previous` receives the version that
  // was active.
  Status Activate(uint64_t version, uint64_t* previous);

  // Canary rollouts (store::Canary): serves `version` to `share_bp` basis points of the
  // subjects beside the active version. Starting one pauses automatic activation in the same
  // write, so that the version it is compared with stays put until an operator decides;
  // calling it again for the running candidate only changes the share (widening). `before`
  // (may be null) receives the canary that ran. NotFound / FailedPrecondition /
  // InvalidArgument as Store::Commit.
  Status SetCanary(uint64_t version, uint32_t share_bp, store::Canary* before);
  // Ends the canary: `promote` makes its version active (exactly as Activate), otherwise
  // everyone is served the active version again. `version` (may be null) receives the
  // candidate. FailedPrecondition when no canary runs.
  Status EndCanary(bool promote, uint64_t* version);

  // Turns automatic activation on or off (persisted in the store's meta "auto_activate" and
  // "auto_activate_reason").
  Status SetAutoActivate(bool enabled);

 private:
  OnlineLoop();
  struct Impl;
  std::unique_ptr<Impl> impl_;
};

}  // namespace plumb::online
