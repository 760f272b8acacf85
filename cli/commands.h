// The `plumb` command line: the offline side of the same library the two processes use.
// Each command returns a Status; main() prints its message on one line and exits non-zero.
// Results go to stdout, progress to stderr.
#pragma once

#include <cstdint>
#include <string>
#include <vector>

#include "core/status.h"
#include "trainer/synth.h"
#include "trainer/train_settings.h"
#include "trainer/trainer.h"

namespace plumb::cli {

struct ImportArgs {
  std::string events;  // CSV path
  std::string db;
  bool skip_bad = false;
  bool sync = true;
};

// The training choices (objective, optimizer, cpr_k, cpr_k3_share, beta, learning_rate, l2,
// batch_size, threads, seed) are the TrainSettings every trainer shares.
struct FitArgs : trainer::TrainSettings {
  FitArgs() { threads = 2; }
  ImportArgs import;  // import.events may be empty: train on what the store holds
  uint32_t dim = 64;
  uint32_t epochs = 20;
  double holdout = 0.0;  // share of pairs held out (stored as the store's holdout)
  bool activate = true;
  uint32_t keep_versions = 5;
  std::string keep_versions_for = "2h";  // also keep every version younger than this
  std::string training_window = "0";     // train only on recent pairs (0: all history)
};

// plumb tune: the fit arguments (store, import, objective cpr, dim, epochs, ...) plus the
// search and whether to publish the chosen candidate. Without fit.import.db the events go
// into a temporary store that is removed afterwards (publish then needs a store).
struct TuneArgs {
  FitArgs fit;
  std::vector<double> betas = {1.0, 2.0, 3.0, 5.0};
  std::vector<double> k3_shares = {0.0};
  uint32_t k = 20;
  uint32_t groups = 5;
  bool publish = false;
};

struct EvalArgs {
  std::string db;
  std::string test;  // CSV with `user,item`
  // Versions to evaluate side by side, on the test pairs every one of them knows; empty or
  // {0}: the active one.
  std::vector<uint64_t> versions;
  uint32_t k = 20;
  uint32_t groups = 5;
  uint32_t threads = 2;
  bool json = false;
};

struct CompareArgs {
  trainer::SynthOptions world;
  // The user's own data instead of a synthetic world: an event CSV to fit on and a test CSV
  // (`user,item`) to evaluate on. There is no true relevance then, so no "truth" column;
  // world.seed still seeds the fits.
  std::string events;
  std::string test;
  bool skip_bad = false;
  uint32_t dim = 64;
  uint32_t epochs = 20;
  uint32_t threads = 2;
  uint32_t k = 20;
  uint32_t groups = 5;
  double beta = 3.0;
  bool json = false;
  // Also fit "cpr tuned": beta chosen by trainer::Tune on a debiased validation split of
  // tune_holdout of the pairs, then refitted on all of them.
  bool tune = true;
  double tune_holdout = 0.1;
  std::vector<double> tune_betas = {1.0, 2.0, 3.0, 5.0};
};

// plumb split (cli/event_split.h).
struct SplitArgs {
  std::string events;
  std::string out;
  std::string kind = "random";  // random, temporal or debiased
  double holdout_fraction = 0.2;
  double validation_fraction = 0.0;
  uint64_t seed = 1;
  bool skip_bad = false;
};

struct TopArgs {
  std::string db;
  std::vector<std::string> users;
  uint32_t count = 10;
  uint64_t version = 0;       // 0: the active one
  std::string names;          // optional `item,name` CSV
  bool include_seen = false;  // default: the user's training items are left out
};

struct AdminArgs {
  std::string db;
  uint64_t version = 0;
  std::string out;  // export directory
  bool json = false;
  bool verify = false;             // inspect: read every block and record, exit non-zero on damage
  std::vector<std::string> users;  // forget: external user ids
};

Status RunSynth(const trainer::SynthOptions& options, const std::string& out_dir);
Status RunImport(const ImportArgs& args);
Status RunSplit(const SplitArgs& args);
Status RunFit(const FitArgs& args);
Status RunEval(const EvalArgs& args);
Status RunTune(const TuneArgs& args);
Status RunCompare(const CompareArgs& args);
Status RunVersions(const AdminArgs& args);
Status RunActivate(const AdminArgs& args);
// Pins (pinned = true) or unpins a kept version: a pinned version is never pruned.
Status RunPin(const AdminArgs& args, bool pinned);
Status RunInspect(const AdminArgs& args);
// Store::Repair with a printed report; Corruption when problems remain afterwards.
Status RunRepair(const AdminArgs& args);
// Store::ForgetUser for each of args.users, with a printed report (the trainer must be
// stopped: the store is opened for writing).
Status RunForget(const AdminArgs& args);
Status RunExport(const AdminArgs& args);
Status RunTop(const TopArgs& args);

}  // namespace plumb::cli
