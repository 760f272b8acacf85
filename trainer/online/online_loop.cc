#include "trainer/online/online_loop.h"

#include <spdlog/spdlog.h>

#include <algorithm>
#include <chrono>
#include <cmath>
#include <condition_variable>
#include <functional>
#include <mutex>
#include <optional>
#include <thread>

#include "core/thread_priority.h"
#include "store/store.h"
#include "store/version_reader.h"
#include "trainer/embeddings.h"
#include "trainer/online/gate.h"
#include "trainer/online/holdout_meta.h"
#include "trainer/online/idle_replay_budget.h"
#include "trainer/online/publish_schedule.h"
#include "trainer/online/refit.h"
#include "trainer/online/stored_embeddings.h"
#include "trainer/online/training_config.h"
#include "trainer/online/training_state.h"
#include "trainer/online/version_writer.h"
#include "trainer/train_settings.h"
#include "trainer/trainer.h"

namespace plumb::online {
namespace {

using Clock = std::chrono::steady_clock;

constexpr char kAutoActivateKey[] = "auto_activate";
constexpr char kAutoActivateReasonKey[] = "auto_activate_reason";
constexpr size_t kReadChunk = 4096;
// Validation users scored per gate check: bounds the cost of a publish on a large catalogue.
constexpr size_t kGateMaxUsers = 2000;

const char* GateName(store::GateOutcome gate) {
  switch (gate) {
    case store::GateOutcome::kFailed:
      return "failed";
    case store::GateOutcome::kSkipped:
      return "skipped";
    case store::GateOutcome::kPassed:
      return "passed";
    case store::GateOutcome::kUnspecified:
      break;
  }
  return "unspecified";
}

Status LoadEmbeddings(const store::Store& store, uint64_t version, uint64_t seed,
                      trainer::Embeddings* out) {
  store::VersionReader reader;
  PLUMB_RETURN_IF_ERROR(store::VersionReader::Open(store, version, &reader));
  return ReadEmbeddings(reader, seed, out);
}

}  // namespace

struct OnlineLoop::Impl {
  store::Store* store = nullptr;
  OnlineOptions options;
  trainer::TrainOptions train_options;
  store::TrainingConfig config;  // what this loop's versions record

  // Owned by the training thread (and by Create before it starts).
  TrainingState state;
  trainer::Embeddings model;
  std::unique_ptr<trainer::FitLoop> fit;
  uint64_t cursor = 0;  // last log sequence folded into `state`
  PublishSchedule schedule{0, 0.0, Clock::now()};  // set by Create
  IdleReplayBudget idle_budget{0.0};               // set by Create
  uint64_t logged_errors = 0;
  // Refits: the background fit, the pairs the live model's last refit covered, and when the
  // next growth-triggered one may start.
  Refitter refitter;
  uint64_t refit_pairs = 0;
  Clock::time_point next_refit_allowed = Clock::now();
  std::string refit_forced_reason;  // non-empty: start one regardless of growth and cool-down
  // The tuner's last choice (options.tune_betas): the pairs it saw, its table and reason.
  uint64_t tuned_pairs = 0;
  std::vector<store::TuneRecord> tune_rows;
  std::string tune_reason;
  // Non-empty while the published versions were trained with another configuration than
  // `config`: nothing is published until a refit with `config` lands.
  std::string pending_config_change;

  // The active version's embeddings, for the gate's side-by-side comparison. Guarded by mu.
  std::shared_ptr<const trainer::Embeddings> active_model;
  // A version activated by request whose embeddings the next publish reads into active_model
  // (0: none). Guarded by mu.
  uint64_t active_model_pending = 0;
  // Reads active_model_pending's version into active_model. Under publish_mu.
  Status ReadPendingActiveModel();

  mutable std::mutex mu;
  std::condition_variable wake;
  // Held for a whole publish and by SetAutoActivate / Activate, so that once they return no
  // publish already under way can still activate its candidate.
  std::mutex publish_mu;
  bool stop = false;
  bool appended = false;
  bool publish_requested = false;
  std::string retrain_requested;  // guarded by mu: reason of a RequestRetrain not yet started
  OnlineStatus status;

  std::thread thread;

  // The training thread: until stopped, each round consumes the log, adopts a finished
  // refit or starts one, trains, publishes when due and waits when there is nothing to do.
  void Run();
  // The steps of a round, each of which owns one concern.
  // False when the loop is to stop; *requested: whether RequestPublish asked for a publish.
  bool TakeRequests(bool* requested);
  bool ConsumeLog(std::vector<store::Event>* events, std::vector<uint64_t>* new_pairs);
  void TrainIncrement(std::span<const uint64_t> new_pairs, bool has_new);
  void MaybeStartRefit();
  bool AdoptFinishedRefit();
  bool Step(std::span<const uint64_t> anchors, uint64_t replay, uint64_t* samples,
            double* loss_sum);
  bool RefitDue() const;
  // Drops pairs that left the training window (between steps, never during a refit's catch-up
  // range: a refit snapshot is taken right after it).
  void ApplyWindow();
  // Publishes when the schedule says so and publishing is allowed; answers RequestPublish.
  void MaybePublish(bool requested);
  // Whether the loop has nothing to train on now: no new events, and no idle replay left
  // (or too few pairs to train). Reports the idle state in the status.
  bool NothingToTrain(bool has_new);
  // Sleeps until woken (new events, a request, Stop) or 100 ms pass.
  void WaitForWork();
  bool Trainable() const { return state.train().size() >= options.min_train_pairs; }
  Status Publish();
  void SetStatus(const std::function<void(OnlineStatus&)>& fn) {
    std::lock_guard<std::mutex> lock(mu);
    fn(status);
  }
};

OnlineLoop::OnlineLoop() : impl_(std::make_unique<Impl>()) {}

OnlineLoop::~OnlineLoop() { Stop(); }

Status OnlineLoop::Create(store::Store* store, const OnlineOptions& options,
                          std::unique_ptr<OnlineLoop>* out) {
  if (store == nullptr || !store->is_primary()) {
    return Status::InvalidArgument("the online loop needs the store opened as primary");
  }
  std::unique_ptr<OnlineLoop> loop(new OnlineLoop());
  Impl& impl = *loop->impl_;
  impl.store = store;
  impl.options = options;
  impl.schedule =
      PublishSchedule(options.publish_every_events, options.publish_every_seconds, Clock::now());
  impl.idle_budget = IdleReplayBudget(options.idle_replay_passes);

  trainer::TrainOptions& t = impl.train_options;
  trainer::TrainSettings settings = options;
  settings.threads = 1;  // StepBatch runs on the training thread; options.threads are a refit's
  PLUMB_RETURN_IF_ERROR(trainer::MakeTrainOptions(settings, &t));
  if (options.holdout_fraction < 0.0 || options.holdout_fraction >= 1.0) {
    return Status::InvalidArgument("holdout_fraction must be in [0, 1)");
  }
  if (options.gate_k == 0) return Status::InvalidArgument("gate_k must be at least 1");
  if (options.refit_epochs == 0) return Status::InvalidArgument("refit_epochs must be >= 1");
  if (!(options.refit_min_growth >= 0.0)) {
    return Status::InvalidArgument("refit_min_growth must be >= 0");
  }
  if (!(options.refit_max_duty > 0.0 && options.refit_max_duty <= 1.0)) {
    return Status::InvalidArgument("refit_max_duty must be in (0, 1]");
  }
  if (options.threads == 0 || options.threads > 256) {
    return Status::InvalidArgument("threads must be in 1..256");
  }

  std::optional<double> stored_holdout;
  PLUMB_RETURN_IF_ERROR(ReadHoldoutFraction(*store, &stored_holdout));
  if (stored_holdout.has_value()) {
    if (*stored_holdout != options.holdout_fraction) {
      spdlog::warn("this store holds out {} of pairs; using that, not the configured {}",
                   *stored_holdout, options.holdout_fraction);
    }
    impl.options.holdout_fraction = *stored_holdout;
  }
  if (!options.tune) impl.options.tune_betas.clear();
  impl.config =
      MakeTrainingConfig("online", t, options.dim, options.refit_epochs, options.replay_ratio,
                         impl.options.holdout_fraction, impl.options.tune_betas);
  impl.config.training_window_ms = options.training_window_ms;
  if (options.training_window_ms < 0) {
    return Status::InvalidArgument("training_window_ms must be >= 0");
  }
  PLUMB_RETURN_IF_ERROR(TrainingState::Load(*store, impl.options.holdout_fraction, &impl.state,
                                            &impl.cursor, options.training_window_ms));

  // Warm start from the newest kept version that did not fail its gate and was trained with
  // this configuration. A version trained otherwise (the configuration changed since) is not
  // a starting point: a rebuild starts at once and nothing is published until it lands.
  std::vector<store::VersionManifest> versions;
  PLUMB_RETURN_IF_ERROR(store->ListVersions(&versions));
  uint64_t active = 0;
  PLUMB_RETURN_IF_ERROR(store->GetActiveVersion(&active));
  bool warm = false;
  if (!versions.empty()) {
    const std::string change = DescribeConfigChange(versions.front(), impl.config);
    if (!change.empty()) {
      impl.pending_config_change = change;
      impl.refit_forced_reason = "training configuration changed (" + change + ")";
      spdlog::warn(
          "version {} was trained with another configuration ({}); rebuilding from the "
          "whole log, and publishing nothing until the rebuild lands",
          versions.front().version, change);
    }
  }
  for (const store::VersionManifest& m : versions) {
    if (!impl.pending_config_change.empty()) break;
    if (m.gate == store::GateOutcome::kFailed && m.version != active) continue;
    PLUMB_RETURN_IF_ERROR(LoadEmbeddings(*store, m.version, options.seed, &impl.model));
    impl.refit_pairs = m.training.refit_pairs;
    if (!impl.options.tune_betas.empty() && !m.tune.empty()) {
      // Continue with the beta the tuner chose for this lineage.
      t.beta = m.training.beta;
      impl.config.beta = t.beta;
      impl.tuned_pairs = m.training.refit_pairs;
      impl.tune_rows = m.tune;
      impl.tune_reason = m.tune_reason;
    }
    spdlog::info("warm start from version {} ({} users, {} items, last refit covered {} pairs)",
                 m.version, m.num_users, m.num_items, impl.refit_pairs);
    warm = true;
    break;
  }
  if (!warm) {
    PLUMB_RETURN_IF_ERROR(
        trainer::Embeddings::Create(options.dim, 0, 0, options.seed, &impl.model));
  }
  PLUMB_RETURN_IF_ERROR(
      impl.model.Grow(impl.state.train().num_users(), impl.state.train().num_items()));
  for (const store::VersionManifest& m : versions) {
    if (m.version != active) continue;
    auto copy = std::make_shared<trainer::Embeddings>();
    PLUMB_RETURN_IF_ERROR(LoadEmbeddings(*store, m.version, options.seed, copy.get()));
    impl.active_model = std::move(copy);
    impl.status.active_validation_recall = m.validation_recall;
  }
  PLUMB_RETURN_IF_ERROR(trainer::FitLoop::Create(t, &impl.model, &impl.state.train(), &impl.fit));

  std::string auto_value;
  Status meta = store->GetMeta(kAutoActivateKey, &auto_value);
  bool auto_activate = options.auto_activate;
  if (meta.ok())
    auto_activate = auto_value == "1";
  else if (!meta.IsNotFound())
    return meta;
  std::string auto_reason;
  if (!auto_activate) {
    Status rs = store->GetMeta(kAutoActivateReasonKey, &auto_reason);
    if (rs.IsNotFound())
      auto_reason = "turned off";
    else if (!rs.ok())
      return rs;
  }

  OnlineStatus& s = impl.status;
  s.active_version = active;
  s.last_sequence = store->LastSequence();
  s.trained_sequence = impl.cursor;
  s.auto_activate = auto_activate;
  s.auto_activate_reason = auto_reason;
  s.objective = options.objective;
  s.num_users = impl.state.users().size();
  s.num_items = impl.state.items().size();
  s.training = impl.config;
  s.pending_config_change = impl.pending_config_change;
  s.refit_pairs = impl.refit_pairs;
  s.train_pairs = impl.state.train().size();
  PLUMB_RETURN_IF_ERROR(store->GetCanary(&s.canary));
  s.tuned_beta = impl.tune_rows.empty() ? 0.0 : t.beta;
  s.tune_reason = impl.tune_reason;
  spdlog::info(
      "training state: cursor {}, {} users, {} items, {} training pairs, {} held out; "
      "training {}",
      impl.cursor, s.num_users, s.num_items, impl.state.train().size(),
      impl.state.validation().size(), FormatTrainingConfig(impl.config));
  *out = std::move(loop);
  return Status::Ok();
}

void OnlineLoop::Start(int nice) {
  Impl& impl = *impl_;
  if (impl.thread.joinable()) return;
  impl.stop = false;
  impl.thread = std::thread([&impl, nice] {
    LowerThisThreadsPriority(nice);
    impl.Run();
  });
}

void OnlineLoop::Stop() {
  Impl& impl = *impl_;
  {
    std::lock_guard<std::mutex> lock(impl.mu);
    impl.stop = true;
  }
  impl.wake.notify_all();
  if (impl.thread.joinable()) impl.thread.join();
  impl.refitter.Cancel();
}

void OnlineLoop::NotifyAppended() {
  {
    std::lock_guard<std::mutex> lock(impl_->mu);
    impl_->appended = true;
  }
  impl_->wake.notify_all();
}

void OnlineLoop::RequestPublish() {
  {
    std::lock_guard<std::mutex> lock(impl_->mu);
    impl_->publish_requested = true;
  }
  impl_->wake.notify_all();
}

void OnlineLoop::RequestRetrain(const std::string& reason) {
  {
    std::lock_guard<std::mutex> lock(impl_->mu);
    impl_->retrain_requested = reason.empty() ? "requested" : reason;
  }
  impl_->wake.notify_all();
}

OnlineStatus OnlineLoop::status() const {
  std::lock_guard<std::mutex> lock(impl_->mu);
  OnlineStatus s = impl_->status;
  s.last_sequence = impl_->store->LastSequence();
  return s;
}

Status OnlineLoop::Activate(uint64_t version, uint64_t* previous) {
  Impl& impl = *impl_;
  std::lock_guard<std::mutex> publishing(impl.publish_mu);
  uint64_t before = 0;
  PLUMB_RETURN_IF_ERROR(impl.store->GetActiveVersion(&before));
  // The operator's choice holds: automatic activation pauses in the same write.
  const std::string reason = "paused: version " + std::to_string(version) +
                             " was activated by request (was " + std::to_string(before) +
                             "); turn it back on with `plumb-query auto-activate on`";
  store::StateChange change;
  change.activate = version;
  change.meta.emplace_back(kAutoActivateKey, "0");
  change.meta.emplace_back(kAutoActivateReasonKey, reason);
  // The store first (it checks the version is whole): servers and the version shipper start on
  // it while this thread reads the version back for the gate (seconds at a million items).
  PLUMB_RETURN_IF_ERROR(impl.store->Commit(change));
  if (previous) *previous = before;
  {
    std::lock_guard<std::mutex> lock(impl.mu);
    if (impl.status.canary.version == version) impl.status.canary = store::Canary{};
    impl.status.active_version = version;
    impl.status.auto_activate = false;
    impl.status.auto_activate_reason = reason;
  }
  spdlog::info("version {} activated by request (was {}); automatic activation paused", version,
               before);
  // The gate's copy of the active version is read at the next publish, not now: reading a
  // million rows here competed for the CPU with the version shipper encoding the same version
  // for remote replicas (3.9 s instead of 0.9 s of a 1M fan-out).
  store::VersionManifest manifest;
  const bool have_manifest = impl.store->ReadManifest(version, &manifest).ok();
  std::lock_guard<std::mutex> lock(impl.mu);
  impl.active_model.reset();
  impl.active_model_pending = version;
  if (have_manifest) impl.status.active_validation_recall = manifest.validation_recall;
  return Status::Ok();
}

Status OnlineLoop::Impl::ReadPendingActiveModel() {
  uint64_t version = 0;
  {
    std::lock_guard<std::mutex> lock(mu);
    version = active_model_pending;
  }
  if (version == 0) return Status::Ok();
  store::VersionReader reader;
  auto copy = std::make_shared<trainer::Embeddings>();
  Status read = store::VersionReader::Open(*store, version, &reader);
  if (read.ok()) read = ReadEmbeddings(reader, options.seed, copy.get());
  std::lock_guard<std::mutex> lock(mu);
  active_model_pending = 0;
  if (!read.ok()) {
    // The gate then compares candidates with nothing (skipped) until another version is
    // active.
    spdlog::error("active version {} cannot be read back for the gate: {}", version,
                  read.ToString());
    status.active_validation_recall = 0.0;
    return read;
  }
  active_model = std::move(copy);
  status.active_validation_recall = reader.manifest().validation_recall;
  return Status::Ok();
}

Status OnlineLoop::SetCanary(uint64_t version, uint32_t share_bp, store::Canary* before) {
  Impl& impl = *impl_;
  std::lock_guard<std::mutex> publishing(impl.publish_mu);
  store::Canary was;
  PLUMB_RETURN_IF_ERROR(impl.store->GetCanary(&was));
  if (before != nullptr) *before = was;
  store::StateChange change;
  change.canary = store::Canary{version, share_bp, 0};
  std::string reason;
  const bool starting = was.version != version;
  if (starting) {
    reason = "paused: a canary of version " + std::to_string(version) +
             " started; promote or abort it (`plumb-query canary-promote` / `canary-abort`), "
             "then turn it back on with `plumb-query auto-activate on`";
    change.meta.emplace_back(kAutoActivateKey, "0");
    change.meta.emplace_back(kAutoActivateReasonKey, reason);
  }
  PLUMB_RETURN_IF_ERROR(impl.store->Commit(change));
  store::Canary now;
  PLUMB_RETURN_IF_ERROR(impl.store->GetCanary(&now));
  std::lock_guard<std::mutex> lock(impl.mu);
  impl.status.canary = now;
  if (starting) {
    impl.status.auto_activate = false;
    impl.status.auto_activate_reason = reason;
    spdlog::info(
        "canary: version {} serves {:.2f} % of the subjects; automatic activation "
        "paused",
        version, share_bp / 100.0);
  } else {
    spdlog::info("canary: version {} now serves {:.2f} % of the subjects (was {:.2f} %)", version,
                 share_bp / 100.0, was.share_bp / 100.0);
  }
  return Status::Ok();
}

Status OnlineLoop::EndCanary(bool promote, uint64_t* version) {
  store::Canary was;
  {
    std::lock_guard<std::mutex> publishing(impl_->publish_mu);
    PLUMB_RETURN_IF_ERROR(impl_->store->GetCanary(&was));
    if (was.version == 0) {
      return Status::FailedPrecondition(
          "no canary runs; start one with `plumb-query "
          "canary-start --model-version N --share PERCENT`");
    }
    if (version != nullptr) *version = was.version;
    if (!promote) {
      store::StateChange change;
      change.canary = store::Canary{};
      PLUMB_RETURN_IF_ERROR(impl_->store->Commit(change));
      std::lock_guard<std::mutex> lock(impl_->mu);
      impl_->status.canary = store::Canary{};
      spdlog::info("canary of version {} aborted; everyone is served the active version",
                   was.version);
      return Status::Ok();
    }
  }
  // Activating the candidate ends the canary in the same write (Store::Commit).
  uint64_t previous = 0;
  PLUMB_RETURN_IF_ERROR(Activate(was.version, &previous));
  std::lock_guard<std::mutex> lock(impl_->mu);
  impl_->status.canary = store::Canary{};
  spdlog::info("canary of version {} promoted (was {})", was.version, previous);
  return Status::Ok();
}

Status OnlineLoop::SetAutoActivate(bool enabled) {
  std::lock_guard<std::mutex> publishing(impl_->publish_mu);
  const std::string reason = enabled ? "" : "turned off by request";
  store::StateChange change;
  change.meta.emplace_back(kAutoActivateKey, enabled ? "1" : "0");
  change.meta.emplace_back(kAutoActivateReasonKey, reason);
  PLUMB_RETURN_IF_ERROR(impl_->store->Commit(change));
  std::lock_guard<std::mutex> lock(impl_->mu);
  impl_->status.auto_activate = enabled;
  impl_->status.auto_activate_reason = reason;
  spdlog::info("automatic activation {}", enabled ? "on" : "off");
  return Status::Ok();
}

bool OnlineLoop::Impl::ConsumeLog(std::vector<store::Event>* events,
                                  std::vector<uint64_t>* new_pairs) {
  Status s = store->ReadEvents(cursor, kReadChunk, events);
  if (!s.ok()) {
    spdlog::error("reading the event log after {}: {}", cursor, s.ToString());
    std::unique_lock<std::mutex> lock(mu);
    wake.wait_for(lock, std::chrono::seconds(1), [this] { return stop; });
    events->clear();
    return false;
  }
  new_pairs->clear();
  for (const store::Event& ev : *events) {
    s = state.Apply(ev, new_pairs);
    if (!s.ok()) {
      spdlog::error("event {}: {}", ev.seq, s.ToString());
      break;
    }
    cursor = ev.seq;
    schedule.AddEvents(1);
  }
  if (events->empty()) return false;
  SetStatus([&](OnlineStatus& st) {
    st.trained_sequence = cursor;
    st.events_trained += events->size();
    st.num_users = state.users().size();
    st.num_items = state.items().size();
    st.train_pairs = state.train().size();
    const uint64_t last = store->LastSequence();
    st.oldest_untrained_received_ms = last > cursor ? events->back().received_ms : 0;
  });
  // After new data, allow a bounded amount of replay training while idle (about this many
  // passes over history), so a quiet stream still converges.
  idle_budget.Refill(state.train().size());
  return true;
}

bool OnlineLoop::Impl::Step(std::span<const uint64_t> anchors, uint64_t replay, uint64_t* samples,
                            double* loss_sum) {
  trainer::StepStats st;
  Status ss = fit->StepBatch(anchors, replay, &st);
  if (!ss.ok()) {
    if (logged_errors++ % 100 == 0) spdlog::warn("training step: {}", ss.ToString());
    return false;
  }
  *samples += st.samples;
  schedule.AddSamples(st.samples);
  *loss_sum += st.mean_loss * static_cast<double>(st.samples);
  return true;
}

void OnlineLoop::Impl::TrainIncrement(std::span<const uint64_t> new_pairs, bool has_new) {
  if (!Trainable()) return;
  const uint32_t bs = std::max<uint32_t>(1, options.batch_size);
  uint64_t samples = 0;
  double loss_sum = 0.0;
  if (!new_pairs.empty()) {
    // One anchored sample per new pair plus replay samples from history.
    for (size_t off = 0; off < new_pairs.size(); off += bs) {
      const size_t n = std::min<size_t>(bs, new_pairs.size() - off);
      const uint64_t replay = static_cast<uint64_t>(options.replay_ratio * n);
      if (!Step(new_pairs.subspan(off, n), replay, &samples, &loss_sum)) break;
    }
  } else if (!has_new && !idle_budget.empty() && !options.refit) {
    Step({}, idle_budget.Take(bs), &samples, &loss_sum);
  }
  if (samples > 0) {
    SetStatus([&](OnlineStatus& st) {
      st.samples_trained += samples;
      st.last_loss = loss_sum / static_cast<double>(samples);
    });
  }
}

void OnlineLoop::Impl::ApplyWindow() {
  if (options.training_window_ms <= 0 || refitter.running()) return;
  uint64_t removed = 0;
  if (Status s = state.Compact(&removed); !s.ok()) {
    spdlog::error("training window: {}", s.ToString());
    return;
  }
  if (removed == 0) return;
  // The last refit covered pairs that are partly gone: count what is left of them.
  refit_pairs = std::min<uint64_t>(refit_pairs, state.train().size());
  spdlog::info("training window: {} pairs older than {:.1f} h before the newest event left "
               "training; {} remain",
               removed, static_cast<double>(options.training_window_ms) / 3.6e6,
               state.train().size());
  SetStatus([&](OnlineStatus& st) {
    st.pairs_expired += removed;
    st.train_pairs = state.train().size();
    st.refit_pairs = refit_pairs;
  });
}

bool OnlineLoop::Impl::RefitDue() const {
  if (!refit_forced_reason.empty()) return true;
  if (!options.refit) return false;
  const uint64_t pairs = state.train().size();
  if (pairs < options.min_train_pairs || pairs <= refit_pairs) return false;
  const double growth = static_cast<double>(pairs - refit_pairs);
  return growth >= options.refit_min_growth * static_cast<double>(refit_pairs);
}

void OnlineLoop::Impl::MaybeStartRefit() {
  {
    std::lock_guard<std::mutex> lock(mu);
    if (!retrain_requested.empty()) {
      if (refit_forced_reason.empty()) refit_forced_reason = retrain_requested;
      retrain_requested.clear();
    }
  }
  if (refitter.running() || !RefitDue()) return;
  const bool forced = !refit_forced_reason.empty();
  if (!forced && Clock::now() < next_refit_allowed) return;
  ApplyWindow();
  if (state.train().size() < std::max<uint64_t>(options.min_train_pairs, 1)) return;
  if (!fit->Sync().ok()) return;
  RefitJob job;
  const auto pairs = state.train().pairs();
  job.pairs.assign(pairs.begin(), pairs.end());
  job.num_users = state.train().num_users();
  job.num_items = state.train().num_items();
  job.options = train_options;
  job.options.threads = options.threads;
  job.dim = options.dim;
  job.epochs = options.refit_epochs;
  job.cursor = cursor;
  // Choose beta again when asked for a rebuild, when never chosen, or once the data doubled.
  const bool tune = !options.tune_betas.empty() &&
                    (forced || tune_rows.empty() || pairs.size() >= 2 * tuned_pairs);
  if (tune) {
    job.tune_betas = options.tune_betas;
    job.validation = state.validation();
    job.validation_k = options.gate_k;
  }
  job.reason =
      forced ? refit_forced_reason
             : (refit_pairs == 0 ? std::string("first fit")
                                 : "history grew " + std::to_string(pairs.size() - refit_pairs) +
                                       " pairs since the last refit");
  const std::string reason = job.reason;
  const size_t n = job.pairs.size();
  if (Status s = refitter.Start(std::move(job)); !s.ok()) {
    spdlog::warn("refit not started: {}", s.ToString());
    return;
  }
  refit_forced_reason.clear();
  spdlog::info("refit started on {} training pairs (events up to {}){}: {}", n, cursor,
               tune ? ", choosing beta" : "", reason);
  SetStatus([&](OnlineStatus& st) {
    st.refit_running = true;
    st.refit_reason = reason;
  });
}

bool OnlineLoop::Impl::AdoptFinishedRefit() {
  RefitResult r;
  if (!refitter.Poll(&r)) return false;
  // Cool-down: refits take at most refit_max_duty of the time on average.
  next_refit_allowed =
      Clock::now() + std::chrono::duration_cast<Clock::duration>(std::chrono::duration<double>(
                         r.seconds * (1.0 / options.refit_max_duty - 1.0)));
  if (!r.status.ok()) {
    spdlog::error("refit ({}) failed after {:.1f} s: {}", r.reason, r.seconds, r.status.ToString());
    SetStatus([&](OnlineStatus& st) {
      st.refit_running = false;
      ++st.refits_failed;
    });
    // A configuration change still needs its rebuild: try again after the cool-down.
    if (!pending_config_change.empty()) refit_forced_reason = r.reason;
    return false;
  }
  // Continue from the refit: its embeddings and optimiser state, grown to today's rows, then
  // the pairs that arrived while it ran, as incremental steps.
  if (r.tuned) {
    if (r.beta != train_options.beta) {
      trainer::TrainOptions t = train_options;
      t.beta = r.beta;
      std::unique_ptr<trainer::FitLoop> next;
      if (Status s = trainer::FitLoop::Create(t, &model, &state.train(), &next); !s.ok()) {
        spdlog::error("refit result not adopted: {}", s.ToString());
        return false;
      }
      fit = std::move(next);
      train_options = t;
    }
    config.beta = r.beta;
    tuned_pairs = r.snapshot_pairs;
    tune_reason = r.tune.reason;
    tune_rows = MakeTuneRecords(r.tune.rows);
    spdlog::info("tuner: {}", tune_reason);
  }
  model = std::move(r.model);
  if (Status s = fit->ReplaceOptimizer(std::move(r.optimizer)); !s.ok()) {
    spdlog::error("refit result not adopted: {}", s.ToString());
    return false;
  }
  const uint64_t total = state.train().size();
  std::vector<uint64_t> later;
  later.reserve(total - r.snapshot_pairs);
  for (uint64_t p = r.snapshot_pairs; p < total; ++p) later.push_back(p);
  uint64_t samples = 0;
  double loss_sum = 0.0;
  if (Status s = fit->Sync(); !s.ok()) {
    spdlog::error("refit result not adopted: {}", s.ToString());
    return false;
  }
  const uint32_t bs = std::max<uint32_t>(1, options.batch_size);
  for (size_t off = 0; off < later.size(); off += bs) {
    const size_t n = std::min<size_t>(bs, later.size() - off);
    if (!Step(std::span<const uint64_t>(later).subspan(off, n),
              static_cast<uint64_t>(options.replay_ratio * n), &samples, &loss_sum)) {
      break;
    }
  }
  refit_pairs = r.snapshot_pairs;
  // A converged fit needs no replay passes on top; new events bring their own budget.
  idle_budget.Clear();
  const bool config_landed = !pending_config_change.empty();
  pending_config_change.clear();
  spdlog::info(
      "refit ({}) done in {:.1f} s on {} pairs, loss {:.4f}; {} pairs that arrived "
      "meanwhile stepped in{}",
      r.reason, r.seconds, r.snapshot_pairs, r.last_loss, later.size(),
      config_landed ? "; the new training configuration is now in charge" : "");
  SetStatus([&](OnlineStatus& st) {
    st.refit_running = false;
    ++st.refits_completed;
    st.last_refit_seconds = r.seconds;
    st.refit_pairs = refit_pairs;
    st.pending_config_change.clear();
    st.training = config;
    if (r.tuned) {
      st.tuned_beta = r.beta;
      st.tune_reason = tune_reason;
    }
  });
  return true;  // Run publishes it at once
}

void OnlineLoop::Impl::Run() {
  std::vector<store::Event> events;
  std::vector<uint64_t> new_pairs;
  bool publish_requested_now = false;
  while (TakeRequests(&publish_requested_now)) {
    const bool has_new = ConsumeLog(&events, &new_pairs);
    const bool adopted = AdoptFinishedRefit();
    MaybeStartRefit();
    TrainIncrement(new_pairs, has_new);
    MaybePublish(publish_requested_now || adopted);  // an adopted refit is published at once
    if (NothingToTrain(has_new)) WaitForWork();
  }
}

bool OnlineLoop::Impl::TakeRequests(bool* requested) {
  std::lock_guard<std::mutex> lock(mu);
  *requested = publish_requested;
  return !stop;
}

void OnlineLoop::Impl::MaybePublish(bool requested) {
  // While a configuration change waits for its rebuild, the old versions stay in charge.
  const bool allowed = Trainable() && pending_config_change.empty();
  // A requested publish happens even with nothing new (RequestPublish's contract).
  if (allowed && schedule.Due(requested, Clock::now())) {
    Status ps = Publish();
    if (!ps.ok()) spdlog::error("publish failed: {}", ps.ToString());
  } else if (!requested) {
    return;
  }
  // Answered: published, or refused until publishing is allowed again.
  std::lock_guard<std::mutex> lock(mu);
  publish_requested = false;
}

bool OnlineLoop::Impl::NothingToTrain(bool has_new) {
  const bool trainable = Trainable();
  const bool waiting_refit = refitter.running() || (RefitDue() && trainable);
  if (options.refit) idle_budget.Clear();  // refits do what idle replay would
  const bool nothing = !has_new && (idle_budget.empty() || !trainable);
  const bool idle = nothing && !schedule.HasUnpublished() && !waiting_refit;
  SetStatus([&](OnlineStatus& st) { st.idle = idle; });
  return nothing;
}

void OnlineLoop::Impl::WaitForWork() {
  std::unique_lock<std::mutex> lock(mu);
  wake.wait_for(lock, std::chrono::milliseconds(100), [this] {
    return stop || appended || publish_requested || !retrain_requested.empty();
  });
  appended = false;
}

Status OnlineLoop::Impl::Publish() {
  if (!options.refit) ApplyWindow();
  std::lock_guard<std::mutex> publishing(publish_mu);
  const auto started = Clock::now();
  PLUMB_RETURN_IF_ERROR(fit->Sync());
  ReadPendingActiveModel().IgnoreError();  // logged; the gate then skips the comparison
  std::shared_ptr<const trainer::Embeddings> active;
  bool auto_activate;
  {
    std::lock_guard<std::mutex> lock(mu);
    active = active_model;
    auto_activate = status.auto_activate;
  }

  GateOptions gopt;
  gopt.k = options.gate_k;
  gopt.tolerance = options.gate_tolerance;
  gopt.max_row_norm = options.gate_max_row_norm;
  const GateVerdict verdict = JudgeCandidate(
      model, active.get(), BuildGateSample(state, kGateMaxUsers), state.train(), gopt);
  const store::GateOutcome gate = verdict.outcome;
  const std::string& reason = verdict.reason;
  const double candidate_recall = verdict.candidate_recall;
  const double active_recall = verdict.active_recall;
  const bool gate_allows = gate == store::GateOutcome::kPassed ||
                           (gate == store::GateOutcome::kSkipped && !options.require_gate);
  const bool activate = gate_allows && auto_activate;

  store::VersionManifest m;
  m.objective = options.objective;
  m.validation_recall = candidate_recall;
  m.validation_k = options.gate_k;
  m.gate = gate;
  m.gate_reason = reason;
  m.figures["active_validation_recall"] = active_recall;
  m.figures["beta"] = options.beta;
  m.training = config;
  m.training.refit_pairs = refit_pairs;
  m.target_group_shares = verdict.target_group_shares;
  m.validation_group_shares = verdict.candidate_group_shares;
  m.validation_shift = verdict.candidate_shift.shift;
  m.validation_shift_distance = verdict.candidate_shift.distance;
  m.tune = tune_rows;
  m.tune_reason = tune_reason;
  uint64_t version = 0;
  PLUMB_RETURN_IF_ERROR(CommitVersion({.store = store,
                                       .state = &state,
                                       .cursor = cursor,
                                       .holdout_fraction = options.holdout_fraction,
                                       .activate = activate},
                                      model, &m, &version));
  schedule.Published(Clock::now());

  std::shared_ptr<const trainer::Embeddings> copy;
  if (activate) copy = std::make_shared<trainer::Embeddings>(model);
  {
    std::lock_guard<std::mutex> lock(mu);
    status.candidate_validation_recall = candidate_recall;
    status.last_publish_ms = m.created_ms;
    switch (gate) {
      case store::GateOutcome::kFailed:
        ++status.candidates_failed;
        break;
      case store::GateOutcome::kSkipped:
        ++status.candidates_skipped;
        break;
      default:
        ++status.candidates_passed;
        break;
    }
    if (activate) {
      active_model = std::move(copy);
      status.active_version = version;
      status.active_validation_recall = candidate_recall;
    }
  }
  const double ms = std::chrono::duration<double, std::milli>(Clock::now() - started).count();
  spdlog::info(
      "version {}: events up to {}, {} users, {} items, recall@{} {:.4f} (active {:.4f}), "
      "gate {}{}{} in {:.0f} ms",
      version, cursor, m.num_users, m.num_items, options.gate_k, candidate_recall, active_recall,
      GateName(gate), reason.empty() ? "" : ": ", reason, ms);
  if (activate) {
    spdlog::info("version {} is now active", version);
  } else if (gate_allows) {
    spdlog::info("version {} kept inactive: automatic activation is off", version);
  }
  return Status::Ok();
}

}  // namespace plumb::online
