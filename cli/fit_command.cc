// plumb import / plumb fit: events from a CSV file into the store's log, and an offline
// training run over everything the log holds, published as a new version.
#include <unistd.h>

#include <chrono>
#include <cmath>
#include <cstdio>
#include <cstdlib>
#include <filesystem>
#include <limits>
#include <optional>

#include "cli/commands.h"
#include "cli/csv_reader.h"
#include "cli/eval_checks.h"
#include "cli/report_format.h"
#include "cli/store_access.h"
#include "core/clock.h"
#include "core/duration.h"
#include "trainer/online/holdout_meta.h"
#include "trainer/online/training_config.h"
#include "trainer/online/training_state.h"
#include "trainer/online/version_writer.h"
#include "trainer/train_settings.h"
#include "trainer/tuner.h"
#include "trainer/validation.h"

namespace plumb::cli {
namespace {

// What identifies an imported file's content when it has no event ids: a 64-bit FNV-1a hash
// (Fowler, Noll, Vo) of every row's user, item, ts as written (0 without one) and weight, in
// order. Not a cryptographic hash: it recognises the same file imported again by mistake.
struct ImportIdentity {
  uint64_t hash = 0xcbf29ce484222325ULL;  // FNV-1a 64 offset basis
  bool has_event_ids = false;
};

void HashBytes(const void* data, size_t n, uint64_t* h) {
  const auto* p = static_cast<const unsigned char*>(data);
  for (size_t i = 0; i < n; ++i) {
    *h ^= p[i];
    *h *= 0x100000001b3ULL;  // FNV-1a 64 prime
  }
}

// Reads and checks the whole file before any store is opened, so that a bad file changes
// nothing (and creates no store directory).
Status ReadForImport(const ImportArgs& args, std::vector<store::EventInput>* events,
                     ImportIdentity* identity) {
  std::vector<CsvEvent> rows;
  PLUMB_RETURN_IF_ERROR(ReadEventCsvTelling("import", args.events, args.skip_bad, &rows));
  *identity = ImportIdentity{};
  events->clear();
  events->reserve(rows.size());
  const int64_t now = NowMs();
  for (CsvEvent& r : rows) {
    HashBytes(r.user.data(), r.user.size() + 1, &identity->hash);  // with the terminating 0
    HashBytes(r.item.data(), r.item.size() + 1, &identity->hash);
    HashBytes(&r.timestamp_ms, sizeof r.timestamp_ms, &identity->hash);
    HashBytes(&r.weight, sizeof r.weight, &identity->hash);
    identity->has_event_ids = identity->has_event_ids || !r.event_id.empty();
    store::EventInput e;
    e.user_id = std::move(r.user);
    e.item_id = std::move(r.item);
    e.timestamp_ms = r.timestamp_ms > 0 ? r.timestamp_ms : now;
    e.weight = r.weight;
    e.event_id = std::move(r.event_id);
    events->push_back(std::move(e));
  }
  return Status::Ok();
}

std::string ImportKey(const ImportIdentity& identity) {
  char key[64];
  std::snprintf(key, sizeof key, "import_fingerprint.%016llx",
                static_cast<unsigned long long>(identity.hash));
  return key;
}

// Appends the events. A file without event ids whose content this store has imported before
// is appended again (the log cannot tell a repeat from new events without ids), with a
// warning that says so; every such import is recorded in the store's meta values.
Status AppendImported(store::Store* store, const std::vector<store::EventInput>& events,
                      const ImportIdentity& identity) {
  std::string earlier;
  const bool watch = !identity.has_event_ids && !events.empty();
  if (watch) {
    if (Status s = store->GetMeta(ImportKey(identity), &earlier); !s.ok() && !s.IsNotFound()) {
      return s;
    }
  }
  store::AppendResult result;
  PLUMB_RETURN_IF_ERROR(store->AppendEvents(events, &result));
  std::fprintf(stderr, "import: %llu events appended, %llu duplicates of earlier event ids, log "
               "now ends at %llu\n",
               static_cast<unsigned long long>(result.appended),
               static_cast<unsigned long long>(result.duplicates),
               static_cast<unsigned long long>(result.last_seq));
  if (!watch) return Status::Ok();
  const uint64_t first = result.last_seq - result.appended + 1;
  if (!earlier.empty()) {
    std::fprintf(stderr,
                 "import: warning: this store imported the same events before (same users, "
                 "items, timestamps and weights, in the same order: log entries %s); the file "
                 "has no event_id column, so they were appended again and the log now holds them "
                 "twice (entries %llu..%llu). Training counts each (user, item) pair once, but "
                 "the event counts double. Give every event an event_id to make a repeated "
                 "import harmless\n",
                 earlier.c_str(), static_cast<unsigned long long>(first),
                 static_cast<unsigned long long>(result.last_seq));
  }
  store::StateChange change;
  change.meta.emplace_back(ImportKey(identity),
                           std::to_string(first) + ".." + std::to_string(result.last_seq));
  return store->Commit(change, nullptr);
}

}  // namespace

Status RunImport(const ImportArgs& args) {
  std::vector<store::EventInput> events;
  ImportIdentity identity;
  PLUMB_RETURN_IF_ERROR(ReadForImport(args, &events, &identity));
  store::StoreOptions so;
  so.sync = args.sync;
  std::unique_ptr<store::Store> store;
  bool created = false;
  PLUMB_RETURN_IF_ERROR(OpenForWrite(args.db, so, &store, &created));
  Status s = AppendImported(store.get(), events, identity);
  if (!s.ok() && created) {
    store.reset();
    RemoveCreatedStore(args.db);
  }
  return s;
}

namespace {

// What fit and tune share: options checked, the store opened (and the events imported), the
// hold-out share settled, and the whole log folded into a training state.
struct Prepared {
  std::unique_ptr<store::Store> store;
  online::TrainingState state;
  uint64_t cursor = 0;
  double holdout = 0.0;
  int64_t window_ms = 0;
  uint64_t expired = 0;  // training pairs outside the training window
  trainer::TrainOptions train_options;
};

Status Prepare(const FitArgs& args, const char* who, Prepared* p) {
  PLUMB_RETURN_IF_ERROR(trainer::MakeTrainOptions(args, &p->train_options));
  if (args.holdout < 0.0 || args.holdout > 0.5) {
    return Status::InvalidArgument("--holdout-fraction must be in [0, 0.5]");
  }
  store::StoreOptions so;
  so.sync = args.import.sync;
  so.keep_versions = args.keep_versions;
  if (Status s = ParseDuration(args.keep_versions_for, &so.keep_versions_for_ms); !s.ok()) {
    return Status::InvalidArgument("--keep-versions-for: " + s.message());
  }
  if (Status s = ParseDuration(args.training_window, &p->window_ms); !s.ok()) {
    return Status::InvalidArgument("--training-window: " + s.message());
  }
  std::vector<store::EventInput> events;
  ImportIdentity identity;
  if (!args.import.events.empty()) {
    PLUMB_RETURN_IF_ERROR(ReadForImport(args.import, &events, &identity));
  }
  bool created = false;
  PLUMB_RETURN_IF_ERROR(OpenForWrite(args.import.db, so, &p->store, &created));
  if (!args.import.events.empty()) {
    if (Status s = AppendImported(p->store.get(), events, identity); !s.ok()) {
      if (created) {
        p->store.reset();
        RemoveCreatedStore(args.import.db);
      }
      return s;
    }
  }

  // The hold-out share is a property of the store: replaying the log with another share
  // would disagree with the interaction sets already written.
  p->holdout = args.holdout;
  std::optional<double> stored;
  PLUMB_RETURN_IF_ERROR(online::ReadHoldoutFraction(*p->store, &stored));
  if (stored.has_value()) {
    if (*stored != args.holdout) {
      std::fprintf(stderr, "%s: this store holds out %g of pairs; using that, not %g\n", who,
                   *stored, args.holdout);
    }
    p->holdout = *stored;
  }

  PLUMB_RETURN_IF_ERROR(online::TrainingState::Load(*p->store, p->holdout, &p->state, &p->cursor,
                                                    p->window_ms));
  std::vector<store::Event> batch;
  while (true) {
    PLUMB_RETURN_IF_ERROR(p->store->ReadEvents(p->cursor, 65536, &batch));
    if (batch.empty()) break;
    for (const store::Event& ev : batch) {
      PLUMB_RETURN_IF_ERROR(p->state.Apply(ev, nullptr));
      p->cursor = ev.seq;
    }
  }
  PLUMB_RETURN_IF_ERROR(p->state.Compact(&p->expired));
  if (p->window_ms > 0) {
    std::fprintf(stderr, "%s: training window %s: %llu pairs older than that before the newest "
                 "event are left out\n",
                 who, args.training_window.c_str(), static_cast<unsigned long long>(p->expired));
  }
  if (p->state.train().empty()) {
    return Status::FailedPrecondition("the store holds no training events");
  }
  return Status::Ok();
}

// Writes `model` as a new version with the state and the cursor, in one commit. The caller
// fills the manifest's objective, gate, figures, training and validation fields.
Status PublishModel(Prepared* p, const trainer::Embeddings& model, store::VersionManifest m,
                    bool activate, uint64_t* version) {
  return online::CommitVersion({.store = p->store.get(),
                                .state = &p->state,
                                .cursor = p->cursor,
                                .holdout_fraction = p->holdout,
                                .activate = activate},
                               model, &m, version);
}

std::string Shares(const std::vector<double>& v) {
  std::string out;
  char buf[16];
  for (double x : v) {
    std::snprintf(buf, sizeof buf, " %.3f", x);
    out += buf;
  }
  return out;
}

}  // namespace

Status RunFit(const FitArgs& args) {
  Prepared p;
  PLUMB_RETURN_IF_ERROR(Prepare(args, "fit", &p));
  const trainer::Interactions& train = p.state.train();
  std::fprintf(stderr, "fit: %u users, %u items, %zu training pairs, %zu held out; %s, dim %u, "
               "%u epochs on %u threads\n",
               train.num_users(), train.num_items(), train.size(), p.state.validation().size(),
               args.objective.c_str(), args.dim, args.epochs, args.threads);

  trainer::Embeddings model;
  PLUMB_RETURN_IF_ERROR(trainer::Embeddings::Create(args.dim, train.num_users(),
                                                    train.num_items(), args.seed, &model));
  std::unique_ptr<trainer::FitLoop> fit;
  PLUMB_RETURN_IF_ERROR(trainer::FitLoop::Create(p.train_options, &model, &train, &fit));
  const auto started = std::chrono::steady_clock::now();
  double last_loss = 0.0;
  PLUMB_RETURN_IF_ERROR(fit->RunEpochs(args.epochs, [&](const trainer::FitProgress& pr) {
    std::fprintf(stderr, "  epoch %3u/%u  loss %.4f  %.2fM positives/s  %.2f s\n", pr.epoch,
                 pr.epochs, pr.mean_loss, pr.positives_per_second / 1e6, pr.seconds);
    last_loss = pr.mean_loss;
    return true;
  }));
  const double seconds =
      std::chrono::duration<double>(std::chrono::steady_clock::now() - started).count();
  if (!model.AllFinite()) {
    return Status::Aborted("training diverged (non-finite values); nothing was published — "
                           "try a smaller --learning-rate");
  }

  store::VersionManifest m;
  m.objective = args.objective;
  m.validation_recall = std::nan("");
  m.gate = store::GateOutcome::kSkipped;
  m.gate_reason = "offline fit";
  m.figures["loss"] = last_loss;
  m.figures["epochs"] = args.epochs;
  m.figures["beta"] = args.beta;
  m.figures["fit_seconds"] = seconds;
  m.training = online::MakeTrainingConfig("fit", p.train_options, args.dim, args.epochs, 0.0,
                                          p.holdout);
  m.training.training_window_ms = p.window_ms;
  m.training.refit_pairs = train.size();
  // With a hold-out, the debiased validation figures of what was just fitted.
  const trainer::ValidationSample sample = trainer::BuildValidationSample(
      train, p.state.validation(), std::numeric_limits<size_t>::max());
  if (!sample.weights.empty()) {
    if (std::string w = LargeKWarning(20, train.num_items()); !w.empty()) {
      std::fprintf(stderr, "fit: validation: %s\n", w.c_str());
    }
    trainer::ValidationScores v;
    PLUMB_RETURN_IF_ERROR(trainer::ScoreOnValidation(sample, model, train, 20, 5, &v));
    m.validation_recall = v.recall;
    m.validation_k = 20;
    m.validation_group_shares = v.group_shares;
    m.target_group_shares = trainer::ValidationGroupShares(sample, train, 5);
    m.validation_shift = v.shift.shift;
    m.validation_shift_distance = v.shift.distance;
    std::fprintf(stderr,
                 "fit: debiased validation on %zu held-out pairs (effective size %.0f): "
                 "Recall@20 %.4f, NDCG@20 %.4f, ARP@20 %.1f\n"
                 "fit: group shares (tail .. head):%s; the validation split's:%s\n"
                 "fit: popularity shift %+.3f (%s), distance %.3f\n",
                 sample.weights.size(), sample.effective_pairs, v.recall, v.ndcg, v.arp,
                 Shares(v.group_shares).c_str(), Shares(m.target_group_shares).c_str(),
                 v.shift.shift,
                 v.shift.shift > 0 ? "toward the head: under-corrected"
                                   : "toward the tail: over-corrected",
                 v.shift.distance);
  }
  uint64_t version = 0;
  PLUMB_RETURN_IF_ERROR(PublishModel(&p, model, std::move(m), args.activate, &version));
  std::printf("version %llu published%s: %s, %u users, %u items, dim %u, %u epochs in %.1f s\n",
              static_cast<unsigned long long>(version), args.activate ? " and activated" : "",
              args.objective.c_str(), model.num_users(), model.num_items(), model.dim(),
              args.epochs, seconds);
  return Status::Ok();
}

Status RunTune(const TuneArgs& given) {
  if (given.fit.objective != "cpr") {
    return Status::InvalidArgument("tune chooses CPR's beta: --objective must be cpr");
  }
  if (given.betas.empty()) return Status::InvalidArgument("--tune-betas: give at least one beta");
  TuneArgs args = given;
  // Without a store, the events go into a temporary one, removed when tune returns.
  std::string temporary;
  if (args.fit.import.db.empty()) {
    if (args.fit.import.events.empty()) {
      return Status::InvalidArgument("tune needs --events, --db or both");
    }
    if (args.publish) return Status::InvalidArgument("--publish needs --db");
    temporary = (std::filesystem::temp_directory_path() /
                 ("plumb-tune-" + std::to_string(::getpid()) + "-" + std::to_string(NowMs())))
                    .string();
    args.fit.import.db = temporary;
    args.fit.import.sync = false;
  }
  struct RemoveTemporary {
    std::string dir;
    ~RemoveTemporary() {
      if (!dir.empty()) RemoveCreatedStore(dir);
    }
  };
  // Declared before p, so destroyed after it: the store closes before its directory goes.
  RemoveTemporary cleanup{temporary};
  Prepared p;
  PLUMB_RETURN_IF_ERROR(Prepare(args.fit, "tune", &p));
  const trainer::Interactions& train = p.state.train();
  if (std::string w = LargeKWarning(args.k, train.num_items()); !w.empty()) {
    std::fprintf(stderr, "tune: %s\n", w.c_str());
  }
  const trainer::ValidationSample sample = trainer::BuildValidationSample(
      train, p.state.validation(), std::numeric_limits<size_t>::max());
  if (sample.weights.empty()) {
    return Status::FailedPrecondition(
        "this store holds no validation pairs: tune needs a hold-out (--holdout-fraction, "
        "e.g. 0.1, on a new store)");
  }
  std::fprintf(stderr, "tune: %u users, %u items, %zu training pairs; debiased validation on "
               "%zu held-out pairs (effective size %.0f); %zu candidates, dim %u, %u epochs "
               "each\n",
               train.num_users(), train.num_items(), train.size(), sample.weights.size(),
               sample.effective_pairs, args.betas.size() * args.k3_shares.size(), args.fit.dim,
               args.fit.epochs);
  std::vector<trainer::TuneCandidate> candidates;
  for (double share : args.k3_shares) {
    for (double b : args.betas) candidates.push_back({b, share});
  }
  trainer::TuneOptions o;
  o.dim = args.fit.dim;
  o.epochs = args.fit.epochs;
  o.k = args.k;
  o.groups = args.groups;
  trainer::TuneResult r;
  PLUMB_RETURN_IF_ERROR(trainer::Tune(
      train, sample, p.train_options, candidates, o,
      [&args](const trainer::TuneRow& row, const trainer::Embeddings&) {
        std::fprintf(stderr, "  beta %g, k3 share %g: validation Recall@%u %.4f in %.1f s\n",
                     row.candidate.beta, row.candidate.cpr_mix_share, args.k, row.scores.recall,
                     row.seconds);
        return true;
      },
      &r));
  std::fputs(FormatTuneTable(r.report, args.k).c_str(), stdout);
  if (!args.publish) return Status::Ok();

  const trainer::TuneRow& chosen = r.report.rows[r.report.chosen];
  trainer::TrainOptions t = p.train_options;
  t.beta = chosen.candidate.beta;
  t.cpr_mix_share = chosen.candidate.cpr_mix_share;
  store::VersionManifest m;
  m.objective = "cpr";
  m.validation_recall = chosen.scores.recall;
  m.validation_k = args.k;
  m.gate = store::GateOutcome::kSkipped;
  m.gate_reason = "offline tune";
  m.training = online::MakeTrainingConfig("tune", t, args.fit.dim, args.fit.epochs, 0.0,
                                          p.holdout, args.betas);
  m.training.training_window_ms = p.window_ms;
  m.training.refit_pairs = train.size();
  m.target_group_shares = r.report.target_group_shares;
  m.validation_group_shares = chosen.scores.group_shares;
  m.validation_shift = chosen.scores.shift.shift;
  m.validation_shift_distance = chosen.scores.shift.distance;
  m.tune = online::MakeTuneRecords(r.report.rows);
  m.tune_reason = r.report.reason;
  uint64_t version = 0;
  PLUMB_RETURN_IF_ERROR(PublishModel(&p, r.model, std::move(m), args.fit.activate, &version));
  std::printf("version %llu published%s: the chosen candidate (beta %g), fitted on the training "
              "pairs (the hold-out stays out)\n",
              static_cast<unsigned long long>(version),
              args.fit.activate ? " and activated" : "", chosen.candidate.beta);
  return Status::Ok();
}

}  // namespace plumb::cli
