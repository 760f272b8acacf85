#include "trainer/online/online_loop.h"

#include <algorithm>
#include <atomic>
#include <chrono>
#include <cmath>
#include <condition_variable>
#include <mutex>
#include <thread>
#include <unordered_map>

#include <spdlog/spdlog.h>

#include "core/metrics.h"
#include "core/scan.h"
#include "core/split.h"
#include "core/topk.h"
#include "store/store.h"
#include "trainer/embeddings.h"
#include "trainer/online/gate.h"
#include "trainer/online/training_state.h"
#include "trainer/trainer.h"

namespace plumb::online {
namespace {

using Clock = std::chrono::steady_clock;

int64_t NowMs() {
  return std::chrono::duration_cast<std::chrono::milliseconds>(
             std::chrono::system_clock::now().time_since_epoch())
      .count();
}

constexpr char kAutoActivateKey[] = "auto_activate";
// The hold-out share is a property of the store (the `plumb` command line uses the same key):
// replaying the log with another share would disagree with the interaction sets written.
constexpr char kHoldoutKey[] = "holdout_fraction";
constexpr size_t kReadChunk = 4096;
// Validation users scored per gate check: bounds the cost of a publish on a large catalogue.
constexpr size_t kGateMaxUsers = 2000;

}  // namespace

struct OnlineLoop::Impl {
  store::Store* store = nullptr;
  OnlineOptions options;
  trainer::TrainOptions train_options;

  // Owned by the training thread (and by Create before it starts).
  TrainingState state;
  trainer::Embeddings model;
  std::unique_ptr<trainer::FitLoop> fit;
  uint64_t cursor = 0;  // last log sequence folded into `state`
  uint64_t events_since_publish = 0;
  Clock::time_point last_publish_time = Clock::now();
  uint64_t idle_samples_budget = 0;
  uint64_t samples_since_publish = 0;

  // The active version's embeddings, for the gate's side-by-side comparison. Guarded by mu.
  std::shared_ptr<const trainer::Embeddings> active_model;

  mutable std::mutex mu;
  std::condition_variable wake;
  // Held for a whole publish and by SetAutoActivate, so that once SetAutoActivate(false)
  // returns no publish already under way can still activate its candidate.
  std::mutex publish_mu;
  bool stop = false;
  bool appended = false;
  bool publish_requested = false;
  OnlineStatus status;

  std::thread thread;

  void Run();
  Status Publish();
  void SetStatus(const std::function<void(OnlineStatus&)>& fn) {
    std::lock_guard<std::mutex> lock(mu);
    fn(status);
  }
};

OnlineLoop::OnlineLoop() : impl_(std::make_unique<Impl>()) {}

OnlineLoop::~OnlineLoop() { Stop(); }

namespace {

Status LoadEmbeddings(const store::Store& store, const store::VersionManifest& m, uint64_t seed,
                      trainer::Embeddings* out) {
  trainer::RowMatrix users(m.num_users, m.dim);
  trainer::RowMatrix items(m.num_items, m.dim);
  PLUMB_RETURN_IF_ERROR(store.ReadMatrix(m.version, store::MatrixKind::kUsers,
                                         std::span<float>(users.data(), users.size())));
  PLUMB_RETURN_IF_ERROR(store.ReadMatrix(m.version, store::MatrixKind::kItems,
                                         std::span<float>(items.data(), items.size())));
  return trainer::Embeddings::FromMatrices(std::move(users), std::move(items), seed, out);
}

}  // namespace

Status OnlineLoop::Create(store::Store* store, const OnlineOptions& options,
                          std::unique_ptr<OnlineLoop>* out) {
  if (store == nullptr || !store->is_primary()) {
    return Status::InvalidArgument("the online loop needs the store opened as primary");
  }
  std::unique_ptr<OnlineLoop> loop(new OnlineLoop());
  Impl& impl = *loop->impl_;
  impl.store = store;
  impl.options = options;

  trainer::TrainOptions& t = impl.train_options;
  PLUMB_RETURN_IF_ERROR(trainer::ParseObjectiveKind(options.objective, &t.objective));
  PLUMB_RETURN_IF_ERROR(trainer::ParseOptimizerKind(options.optimizer, &t.optimizer));
  t.cpr_k = options.cpr_k;
  t.cpr_mix_share = options.cpr_k3_share;
  t.cpr_mix_k = 3;
  t.beta = options.beta;
  t.learning_rate = static_cast<float>(options.learning_rate);
  t.l2 = static_cast<float>(options.l2);
  t.batch_size = options.batch_size;
  t.threads = 1;  // StepBatch runs on the training thread
  t.seed = options.seed;
  PLUMB_RETURN_IF_ERROR(trainer::ValidateTrainOptions(t));
  if (options.holdout_fraction < 0.0 || options.holdout_fraction >= 1.0) {
    return Status::InvalidArgument("holdout_fraction must be in [0, 1)");
  }
  if (options.gate_k == 0) return Status::InvalidArgument("gate_k must be at least 1");

  std::string stored_holdout;
  Status hs = store->GetMeta(kHoldoutKey, &stored_holdout);
  if (hs.ok()) {
    const double stored = std::stod(stored_holdout);
    if (stored != options.holdout_fraction) {
      spdlog::warn("this store holds out {} of pairs; using that, not the configured {}", stored,
                   options.holdout_fraction);
    }
    impl.options.holdout_fraction = stored;
  } else if (!hs.IsNotFound()) {
    return hs;
  }
  PLUMB_RETURN_IF_ERROR(
      TrainingState::Load(*store, impl.options.holdout_fraction, &impl.state, &impl.cursor));

  // Warm start from the newest kept version that did not fail its gate.
  std::vector<store::VersionManifest> versions;
  PLUMB_RETURN_IF_ERROR(store->ListVersions(&versions));
  uint64_t active = 0;
  PLUMB_RETURN_IF_ERROR(store->GetActiveVersion(&active));
  bool warm = false;
  for (const store::VersionManifest& m : versions) {
    if (m.gate == store::GateOutcome::kFailed && m.version != active) continue;
    if (m.dim != options.dim) {
      return Status::FailedPrecondition(
          "the store's version " + std::to_string(m.version) + " has dim " +
          std::to_string(m.dim) + " but dim is configured as " + std::to_string(options.dim) +
          "; use the stored dim or a new store");
    }
    PLUMB_RETURN_IF_ERROR(LoadEmbeddings(*store, m, options.seed, &impl.model));
    spdlog::info("warm start from version {} ({} users, {} items)", m.version, m.num_users,
                 m.num_items);
    warm = true;
    break;
  }
  if (!warm) {
    PLUMB_RETURN_IF_ERROR(trainer::Embeddings::Create(options.dim, 0, 0, options.seed, &impl.model));
  }
  PLUMB_RETURN_IF_ERROR(
      impl.model.Grow(impl.state.train().num_users(), impl.state.train().num_items()));
  for (const store::VersionManifest& m : versions) {
    if (m.version != active) continue;
    auto copy = std::make_shared<trainer::Embeddings>();
    PLUMB_RETURN_IF_ERROR(LoadEmbeddings(*store, m, options.seed, copy.get()));
    impl.active_model = std::move(copy);
    impl.status.active_validation_recall = m.validation_recall;
  }
  PLUMB_RETURN_IF_ERROR(
      trainer::FitLoop::Create(t, &impl.model, &impl.state.train(), &impl.fit));

  std::string auto_value;
  Status meta = store->GetMeta(kAutoActivateKey, &auto_value);
  bool auto_activate = options.auto_activate;
  if (meta.ok()) auto_activate = auto_value == "1";
  else if (!meta.IsNotFound()) return meta;

  OnlineStatus& s = impl.status;
  s.active_version = active;
  s.last_sequence = store->LastSequence();
  s.trained_sequence = impl.cursor;
  s.auto_activate = auto_activate;
  s.objective = options.objective;
  s.num_users = impl.state.users().size();
  s.num_items = impl.state.items().size();
  spdlog::info("training state: cursor {}, {} users, {} items, {} training pairs, {} held out",
               impl.cursor, s.num_users, s.num_items, impl.state.train().size(),
               impl.state.validation().size());
  *out = std::move(loop);
  return Status::Ok();
}

void OnlineLoop::Start() {
  Impl& impl = *impl_;
  if (impl.thread.joinable()) return;
  impl.stop = false;
  impl.thread = std::thread([&impl] { impl.Run(); });
}

void OnlineLoop::Stop() {
  Impl& impl = *impl_;
  {
    std::lock_guard<std::mutex> lock(impl.mu);
    impl.stop = true;
  }
  impl.wake.notify_all();
  if (impl.thread.joinable()) impl.thread.join();
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

OnlineStatus OnlineLoop::status() const {
  std::lock_guard<std::mutex> lock(impl_->mu);
  OnlineStatus s = impl_->status;
  s.last_sequence = impl_->store->LastSequence();
  return s;
}

Status OnlineLoop::Activate(uint64_t version, uint64_t* previous) {
  Impl& impl = *impl_;
  std::lock_guard<std::mutex> publishing(impl.publish_mu);
  store::VersionManifest m;
  PLUMB_RETURN_IF_ERROR(impl.store->ReadManifest(version, &m));
  auto copy = std::make_shared<trainer::Embeddings>();
  PLUMB_RETURN_IF_ERROR(LoadEmbeddings(*impl.store, m, impl.options.seed, copy.get()));
  uint64_t before = 0;
  PLUMB_RETURN_IF_ERROR(impl.store->GetActiveVersion(&before));
  PLUMB_RETURN_IF_ERROR(impl.store->Activate(version));
  if (previous) *previous = before;
  std::lock_guard<std::mutex> lock(impl.mu);
  impl.active_model = std::move(copy);
  impl.status.active_version = version;
  impl.status.active_validation_recall = m.validation_recall;
  spdlog::info("version {} activated by request (was {})", version, before);
  return Status::Ok();
}

Status OnlineLoop::SetAutoActivate(bool enabled) {
  std::lock_guard<std::mutex> publishing(impl_->publish_mu);
  store::StateChange change;
  change.meta.emplace_back(kAutoActivateKey, enabled ? "1" : "0");
  PLUMB_RETURN_IF_ERROR(impl_->store->Commit(change));
  std::lock_guard<std::mutex> lock(impl_->mu);
  impl_->status.auto_activate = enabled;
  spdlog::info("automatic activation {}", enabled ? "on" : "off");
  return Status::Ok();
}

void OnlineLoop::Impl::Run() {
  std::vector<store::Event> events;
  std::vector<uint64_t> new_pairs;
  uint64_t logged_errors = 0;
  while (true) {
    bool publish_now = false;
    {
      std::lock_guard<std::mutex> lock(mu);
      if (stop) return;
      publish_now = publish_requested;
    }
    Status s = store->ReadEvents(cursor, kReadChunk, &events);
    if (!s.ok()) {
      spdlog::error("reading the event log after {}: {}", cursor, s.ToString());
      std::unique_lock<std::mutex> lock(mu);
      wake.wait_for(lock, std::chrono::seconds(1), [this] { return stop; });
      continue;
    }
    new_pairs.clear();
    for (const store::Event& ev : events) {
      s = state.Apply(ev, &new_pairs);
      if (!s.ok()) {
        spdlog::error("event {}: {}", ev.seq, s.ToString());
        break;
      }
      cursor = ev.seq;
      ++events_since_publish;
    }
    const bool has_new = !events.empty();
    if (has_new) {
      SetStatus([&](OnlineStatus& st) {
        st.trained_sequence = cursor;
        st.events_trained += events.size();
        st.num_users = state.users().size();
        st.num_items = state.items().size();
        const uint64_t last = store->LastSequence();
        st.oldest_untrained_received_ms = last > cursor ? events.back().received_ms : 0;
      });
      // After new data, allow a bounded amount of replay training while idle (about this
      // many passes over history), so a quiet stream still converges.
      idle_samples_budget = static_cast<uint64_t>(
          options.idle_replay_passes * static_cast<double>(state.train().size()));
    }

    // Train: one anchored sample per new pair plus replay samples from history.
    const bool trainable = state.train().size() >= options.min_train_pairs;
    if (trainable) {
      const uint32_t bs = std::max<uint32_t>(1, options.batch_size);
      uint64_t replay_total = 0;
      uint64_t samples = 0;
      double loss_sum = 0.0;
      auto step = [&](std::span<const uint64_t> anchors, uint64_t replay) {
        trainer::StepStats st;
        Status ss = fit->StepBatch(anchors, replay, &st);
        if (!ss.ok()) {
          if (logged_errors++ % 100 == 0) spdlog::warn("training step: {}", ss.ToString());
          return false;
        }
        samples += st.samples;
        samples_since_publish += st.samples;
        loss_sum += st.mean_loss * static_cast<double>(st.samples);
        return true;
      };
      if (!new_pairs.empty()) {
        for (size_t off = 0; off < new_pairs.size(); off += bs) {
          const size_t n = std::min<size_t>(bs, new_pairs.size() - off);
          const uint64_t replay = static_cast<uint64_t>(options.replay_ratio * n);
          replay_total += replay;
          if (!step(std::span<const uint64_t>(new_pairs).subspan(off, n), replay)) break;
        }
      } else if (!has_new && idle_samples_budget > 0) {
        const uint64_t replay = std::min<uint64_t>(bs, idle_samples_budget);
        idle_samples_budget -= replay;
        step({}, replay);
      }
      if (samples > 0) {
        SetStatus([&](OnlineStatus& st) {
          st.samples_trained += samples;
          st.last_loss = loss_sum / static_cast<double>(samples);
        });
      }
    }

    const double since = std::chrono::duration<double>(Clock::now() - last_publish_time).count();
    const bool due = (events_since_publish > 0 || samples_since_publish > 0) &&
                     (events_since_publish >= options.publish_every_events ||
                      since >= options.publish_every_seconds || publish_now);
    if (trainable && due) {
      Status ps = Publish();
      if (!ps.ok()) spdlog::error("publish failed: {}", ps.ToString());
      {
        std::lock_guard<std::mutex> lock(mu);
        publish_requested = false;
      }
    } else if (publish_now && !trainable) {
      std::lock_guard<std::mutex> lock(mu);
      publish_requested = false;
    }

    const bool idle = !has_new && (idle_samples_budget == 0 || !trainable) &&
                      events_since_publish == 0 && samples_since_publish == 0;
    SetStatus([&](OnlineStatus& st) { st.idle = idle; });
    if (!has_new && (idle_samples_budget == 0 || !trainable)) {
      std::unique_lock<std::mutex> lock(mu);
      wake.wait_for(lock, std::chrono::milliseconds(100),
                    [this] { return stop || appended || publish_requested; });
      appended = false;
    }
  }
}

Status OnlineLoop::Impl::Publish() {
  std::lock_guard<std::mutex> publishing(publish_mu);
  const auto started = Clock::now();
  PLUMB_RETURN_IF_ERROR(fit->Sync());
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
  const GateVerdict verdict = JudgeCandidate(model, active.get(),
                                             BuildGateSample(state, kGateMaxUsers),
                                             state.train(), gopt);
  const store::GateOutcome gate = verdict.outcome;
  const std::string& reason = verdict.reason;
  const double candidate_recall = verdict.candidate_recall;
  const double active_recall = verdict.active_recall;
  const bool activate = gate != store::GateOutcome::kFailed && auto_activate;

  store::VersionWrite write;
  store::VersionManifest& m = write.manifest;
  m.created_ms = NowMs();
  m.objective = options.objective;
  m.events_seen = cursor;
  m.num_interactions = state.train().size();
  m.num_users = model.num_users();
  m.num_items = model.num_items();
  m.dim = model.dim();
  m.validation_recall = candidate_recall;
  m.validation_k = options.gate_k;
  m.gate = gate;
  m.gate_reason = reason;
  m.figures["active_validation_recall"] = active_recall;
  m.figures["beta"] = options.beta;
  write.users = {model.users().data(), model.num_users(), model.dim()};
  write.items = {model.items().data(), model.num_items(), model.dim()};
  write.item_degrees = state.train().item_degrees();

  store::StateChange change;
  state.CollectChanges(&change);
  change.cursor = cursor;
  change.version = &write;
  change.activate_published = activate;
  change.meta.emplace_back(kHoldoutKey, std::to_string(options.holdout_fraction));
  uint64_t version = 0;
  PLUMB_RETURN_IF_ERROR(store->Commit(change, &version));
  state.MarkPersisted();
  events_since_publish = 0;
  samples_since_publish = 0;
  last_publish_time = Clock::now();

  std::shared_ptr<const trainer::Embeddings> copy;
  if (activate) copy = std::make_shared<trainer::Embeddings>(model);
  {
    std::lock_guard<std::mutex> lock(mu);
    status.candidate_validation_recall = candidate_recall;
    status.last_publish_ms = m.created_ms;
    if (gate == store::GateOutcome::kFailed) ++status.candidates_failed;
    else if (gate == store::GateOutcome::kSkipped)
      ++status.candidates_skipped;
    else ++status.candidates_passed;
    if (activate) {
      active_model = std::move(copy);
      status.active_version = version;
      status.active_validation_recall = candidate_recall;
    }
  }
  const double ms = std::chrono::duration<double, std::milli>(Clock::now() - started).count();
  spdlog::info("version {}: events up to {}, {} users, {} items, recall@{} {:.4f} (active {:.4f}), "
               "gate {}{}{} in {:.0f} ms",
               version, cursor, m.num_users, m.num_items, options.gate_k, candidate_recall,
               active_recall,
               gate == store::GateOutcome::kFailed ? "failed"
               : gate == store::GateOutcome::kSkipped ? "skipped" : "passed",
               reason.empty() ? "" : ": ", reason, ms);
  if (activate) spdlog::info("version {} is now active", version);
  return Status::Ok();
}

}  // namespace plumb::online
