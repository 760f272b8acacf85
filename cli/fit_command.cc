// plumb import / plumb fit: events from a CSV file into the store's log, and an offline
// training run over everything the log holds, published as a new version.
#include <chrono>
#include <cstdio>

#include "cli/commands.h"
#include "cli/csv_reader.h"
#include "cli/store_access.h"
#include "trainer/online/training_config.h"
#include "core/duration.h"
#include "trainer/online/training_state.h"

namespace plumb::cli {
namespace {

constexpr char kHoldoutKey[] = "holdout_fraction";

int64_t NowMs() {
  return std::chrono::duration_cast<std::chrono::milliseconds>(
             std::chrono::system_clock::now().time_since_epoch())
      .count();
}

// Reads and validates the whole file first, so that a bad line changes nothing.
// Reads and checks the whole file before any store is opened, so that a bad file changes
// nothing (and creates no store directory).
Status ReadForImport(const ImportArgs& args, std::vector<store::EventInput>* events) {
  std::vector<CsvEvent> rows;
  CsvReadReport report;
  CsvReadOptions opt;
  opt.skip_bad = args.skip_bad;
  PLUMB_RETURN_IF_ERROR(ReadEventCsv(args.events, opt, &rows, &report));
  if (report.skipped > 0) {
    std::fprintf(stderr, "import: skipped %llu malformed lines (first: %s)\n",
                 static_cast<unsigned long long>(report.skipped),
                 report.first_skip_reason.c_str());
  }
  for (const std::string& w : report.warnings)
    std::fprintf(stderr, "import: warning: %s\n", w.c_str());
  events->clear();
  events->reserve(rows.size());
  const int64_t now = NowMs();
  for (CsvEvent& r : rows) {
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

Status AppendImported(store::Store* store, const std::vector<store::EventInput>& events) {
  store::AppendResult result;
  PLUMB_RETURN_IF_ERROR(store->AppendEvents(events, &result));
  std::fprintf(stderr, "import: %llu events appended, %llu duplicates of earlier event ids, log "
               "now ends at %llu\n",
               static_cast<unsigned long long>(result.appended),
               static_cast<unsigned long long>(result.duplicates),
               static_cast<unsigned long long>(result.last_seq));
  return Status::Ok();
}

}  // namespace

Status RunImport(const ImportArgs& args) {
  std::vector<store::EventInput> events;
  PLUMB_RETURN_IF_ERROR(ReadForImport(args, &events));
  store::StoreOptions so;
  so.sync = args.sync;
  std::unique_ptr<store::Store> store;
  bool created = false;
  PLUMB_RETURN_IF_ERROR(OpenForWrite(args.db, so, &store, &created));
  Status s = AppendImported(store.get(), events);
  if (!s.ok() && created) {
    store.reset();
    RemoveCreatedStore(args.db);
  }
  return s;
}

Status MakeTrainOptions(const FitArgs& args, trainer::TrainOptions* out) {
  trainer::TrainOptions t;
  PLUMB_RETURN_IF_ERROR(trainer::ParseObjectiveKind(args.objective, &t.objective));
  PLUMB_RETURN_IF_ERROR(trainer::ParseOptimizerKind(args.optimizer, &t.optimizer));
  t.cpr_k = args.k;
  t.cpr_mix_k = 3;
  t.cpr_mix_share = args.k3_share;
  t.beta = args.beta;
  t.learning_rate = static_cast<float>(args.learning_rate);
  t.l2 = static_cast<float>(args.l2);
  t.batch_size = args.batch_size;
  t.threads = args.threads;
  t.seed = args.seed;
  PLUMB_RETURN_IF_ERROR(trainer::ValidateTrainOptions(t));
  *out = t;
  return Status::Ok();
}

Status RunFit(const FitArgs& args) {
  trainer::TrainOptions train_options;
  PLUMB_RETURN_IF_ERROR(MakeTrainOptions(args, &train_options));
  if (args.holdout < 0.0 || args.holdout > 0.5) {
    return Status::InvalidArgument("--holdout-fraction must be in [0, 0.5]");
  }
  store::StoreOptions so;
  so.sync = args.import.sync;
  so.keep_versions = args.keep_versions;
  if (Status s = ParseDuration(args.keep_versions_for, &so.keep_versions_for_ms); !s.ok()) {
    return Status::InvalidArgument("--keep-versions-for: " + s.message());
  }
  std::vector<store::EventInput> events;
  if (!args.import.events.empty()) PLUMB_RETURN_IF_ERROR(ReadForImport(args.import, &events));
  std::unique_ptr<store::Store> store;
  bool created = false;
  PLUMB_RETURN_IF_ERROR(OpenForWrite(args.import.db, so, &store, &created));
  if (!args.import.events.empty()) {
    if (Status s = AppendImported(store.get(), events); !s.ok()) {
      if (created) {
        store.reset();
        RemoveCreatedStore(args.import.db);
      }
      return s;
    }
  }

  // The hold-out share is a property of the store: replaying the log with another share
  // would disagree with the interaction sets already written.
  double holdout = args.holdout;
  std::string stored;
  if (Status s = store->GetMeta(kHoldoutKey, &stored); s.ok()) {
    holdout = std::stod(stored);
    if (holdout != args.holdout) {
      std::fprintf(stderr, "fit: this store holds out %g of pairs; using that, not %g\n", holdout,
                   args.holdout);
    }
  } else if (!s.IsNotFound()) {
    return s;
  }

  online::TrainingState state;
  uint64_t cursor = 0;
  PLUMB_RETURN_IF_ERROR(online::TrainingState::Load(*store, holdout, &state, &cursor));
  std::vector<store::Event> batch;
  while (true) {
    PLUMB_RETURN_IF_ERROR(store->ReadEvents(cursor, 65536, &batch));
    if (batch.empty()) break;
    for (const store::Event& ev : batch) {
      PLUMB_RETURN_IF_ERROR(state.Apply(ev, nullptr));
      cursor = ev.seq;
    }
  }
  const trainer::Interactions& train = state.train();
  if (train.empty()) return Status::FailedPrecondition("the store holds no training events");
  std::fprintf(stderr, "fit: %u users, %u items, %zu training pairs, %zu held out; %s, dim %u, "
               "%u epochs on %u threads\n",
               train.num_users(), train.num_items(), train.size(), state.validation().size(),
               args.objective.c_str(), args.dim, args.epochs, args.threads);

  trainer::Embeddings model;
  PLUMB_RETURN_IF_ERROR(trainer::Embeddings::Create(args.dim, train.num_users(),
                                                    train.num_items(), args.seed, &model));
  std::unique_ptr<trainer::FitLoop> fit;
  PLUMB_RETURN_IF_ERROR(trainer::FitLoop::Create(train_options, &model, &train, &fit));
  const auto started = std::chrono::steady_clock::now();
  double last_loss = 0.0;
  PLUMB_RETURN_IF_ERROR(fit->RunEpochs(args.epochs, [&](const trainer::FitProgress& p) {
    std::fprintf(stderr, "  epoch %3u/%u  loss %.4f  %.2fM positives/s  %.2f s\n", p.epoch,
                 p.epochs, p.mean_loss, p.positives_per_second / 1e6, p.seconds);
    last_loss = p.mean_loss;
    return true;
  }));
  const double seconds =
      std::chrono::duration<double>(std::chrono::steady_clock::now() - started).count();
  if (!model.AllFinite()) {
    return Status::Aborted("training diverged (non-finite values); nothing was published — "
                           "try a smaller --learning-rate");
  }

  store::VersionWrite write;
  store::VersionManifest& m = write.manifest;
  m.created_ms = NowMs();
  m.objective = args.objective;
  m.events_seen = cursor;
  m.num_interactions = train.size();
  m.num_users = model.num_users();
  m.num_items = model.num_items();
  m.dim = model.dim();
  m.validation_recall = std::nan("");
  m.gate = store::GateOutcome::kSkipped;
  m.gate_reason = "offline fit";
  m.figures["loss"] = last_loss;
  m.figures["epochs"] = args.epochs;
  m.figures["beta"] = args.beta;
  m.figures["fit_seconds"] = seconds;
  m.training = online::MakeTrainingConfig("fit", train_options, args.dim, args.epochs, 0.0,
                                          holdout);
  m.training.refit_pairs = train.size();
  write.users = {model.users().data(), model.num_users(), model.dim()};
  write.items = {model.items().data(), model.num_items(), model.dim()};
  write.item_degrees = train.item_degrees();

  store::StateChange change;
  state.CollectChanges(&change);
  change.cursor = cursor;
  change.version = &write;
  change.activate_published = args.activate;
  char holdout_text[32];
  std::snprintf(holdout_text, sizeof holdout_text, "%.17g", holdout);
  change.meta.emplace_back(kHoldoutKey, holdout_text);
  uint64_t version = 0;
  PLUMB_RETURN_IF_ERROR(store->Commit(change, &version));
  state.MarkPersisted();
  std::printf("version %llu published%s: %s, %u users, %u items, dim %u, %u epochs in %.1f s\n",
              static_cast<unsigned long long>(version), args.activate ? " and activated" : "",
              args.objective.c_str(), m.num_users, m.num_items, m.dim, args.epochs, seconds);
  return Status::Ok();
}

}  // namespace plumb::cli
