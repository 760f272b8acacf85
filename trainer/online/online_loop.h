// OnlineLoop: plumb-train's training thread. It tails the store's event log after its cursor,
// folds new events into the in-memory training state (id dictionaries, interaction sets,
// item degrees, a held-out validation stream), steps the configured objective on
// mini-batches of new events mixed with a replay sample of history, and every publish
// interval builds a candidate version, gates it, and commits it together with the training
// state and the cursor in one atomic store write.
//
// Thread safety: Start/Stop from one thread; every other method may be called from any
// thread (the gRPC services call them) while the loop runs.
#pragma once

#include <cstdint>
#include <memory>
#include <string>

#include "core/status.h"

namespace plumb::store {
class Store;
}

namespace plumb::online {

struct OnlineOptions {
  std::string objective = "cpr";   // cpr | bpr | bce
  uint32_t dim = 64;
  uint32_t cpr_k = 2;              // CPR sample size
  double cpr_k3_share = 0.0;       // share of k=3 samples mixed into CPR batches
  double beta = 3.0;               // dynamic sampling: candidates drawn per kept sample
  double learning_rate = 0.05;
  double l2 = 1e-4;
  std::string optimizer = "adagrad";  // sgd | adagrad
  uint32_t batch_size = 1024;      // samples per mini-batch
  double replay_ratio = 3.0;       // replayed history interactions per new interaction
  // Once the log is consumed, keep training on replayed history for about this many passes
  // over the training pairs (counted in samples), so a quiet stream still converges; what
  // it learns is published at the next publish interval. 0 = no idle training.
  double idle_replay_passes = 10.0;
  uint32_t threads = 1;
  uint64_t seed = 1;
  double holdout_fraction = 0.02;  // share of (user,item) pairs held out for validation
  uint64_t publish_every_events = 20000;
  double publish_every_seconds = 30.0;
  uint32_t min_train_pairs = 100;  // no version before this many training pairs
  uint32_t gate_k = 20;
  double gate_tolerance = 0.02;    // allowed absolute drop of validation Recall@K
  double gate_max_row_norm = 100.0;
  bool auto_activate = true;       // initial value; persisted in the store's meta
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
  uint64_t candidates_skipped = 0;           // not gated (nothing to compare with); not "passed"
  int64_t oldest_untrained_received_ms = 0;  // 0 when caught up
  int64_t last_publish_ms = 0;
  // Caught up with the log, idle replay spent, and everything learned is published.
  bool idle = false;
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

  // Starts the training thread.
  void Start();
  // Finishes the mini-batch in hand and stops; publishes nothing half-done. Idempotent.
  void Stop();

  // Wakes the loop: new events were appended (the loop also polls).
  void NotifyAppended();

  // Forces a publish at the next opportunity (tests, and the end of a stream in demos).
  void RequestPublish();

  OnlineStatus status() const;

  // Promotion or rollback: makes a kept version active. NotFound / FailedPrecondition as
  // Store::Activate. `previous` receives the version that was active.
  Status Activate(uint64_t version, uint64_t* previous);

  // Turns automatic activation on or off (persisted in the store's meta "auto_activate").
  Status SetAutoActivate(bool enabled);

 private:
  OnlineLoop();
  struct Impl;
  std::unique_ptr<Impl> impl_;
};

}  // namespace plumb::online
