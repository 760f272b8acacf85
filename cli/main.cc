// plumb: the offline command line. `plumb --help` lists the commands, `plumb CMD --help`
// their options.
#include <CLI/CLI.hpp>
#include <cstdio>
#include <string>
#include <vector>

#include "cli/commands.h"

namespace {

using namespace plumb;
using namespace plumb::cli;

void AddWorldOptions(CLI::App* cmd, trainer::SynthOptions* w) {
  cmd->add_option("--users", w->users, "members of the lending library")->capture_default_str();
  cmd->add_option("--items", w->items, "tools in the catalogue")->capture_default_str();
  cmd->add_option("--interactions", w->target_interactions, "about this many observed borrowings")
      ->capture_default_str();
  cmd->add_option("--seed", w->seed, "random seed")->capture_default_str();
  cmd->add_option("--alpha", w->alpha, "exponent of relevance in the exposure probability")
      ->capture_default_str();
  cmd->add_option("--zipf", w->zipf, "skew of tool visibility (larger: more popularity bias)")
      ->capture_default_str();
  cmd->add_option("--test-per-user", w->test_items_per_user,
                  "tools drawn per member for the ground-truth test")
      ->capture_default_str();
  cmd->add_option_function<std::string>(
         "--drift",
         [w](const std::string& name) {
           // Cannot fail: the IsMember check below admits only the names it knows.
           trainer::ParseSynthDrift(name, &w->drift).IgnoreError();
         },
         "one change half-way: none, popularity (another shelf order) or tastes (members' "
         "tastes move; the test follows the late tastes)")
      ->check(CLI::IsMember({"none", "popularity", "tastes"}))
      ->default_str("none");
  cmd->add_option("--drift-at", w->drift_at, "when the drift happens, as a share of the window")
      ->check(CLI::Range(0.01, 0.99))
      ->capture_default_str();
  cmd->add_option("--drift-strength", w->drift_strength,
                  "tastes drift: how far tastes move (0 none .. 1 a fresh draw)")
      ->check(CLI::Range(0.0, 1.0))
      ->capture_default_str();
  cmd->add_option("--appeal-spread", w->appeal_sigma,
                  "spread (standard deviation) of tools' genuine appeal, a logit added to every "
                  "member's relevance")
      ->check(CLI::Range(0.0, 5.0))
      ->capture_default_str();
  cmd->add_option("--appeal-visibility", w->appeal_visibility,
                  "correlation between a tool's appeal and its visibility (0: none, the truly "
                  "relevant tools sit in the tail; 1: the most appealing are shown most)")
      ->check(CLI::Range(-1.0, 1.0))
      ->capture_default_str();
  cmd->add_option("--arrival-span", w->arrival_span,
                  "members and tools join during this first share of the window (0 = all at "
                  "the start)")
      ->check(CLI::Range(0.0, 0.95))
      ->capture_default_str();
}

// The training flags, named and ranged as plumb-train's keys of the same meaning (the ranges
// are the trainer's own limits, so a bad value is refused here, naming the flag typed).
void AddTrainOptions(CLI::App* cmd, FitArgs* a) {
  cmd->add_option("--objective", a->objective, "cpr, bpr or bce")
      ->check(CLI::IsMember({"cpr", "bpr", "bce"}))
      ->capture_default_str();
  cmd->add_option("--dim", a->dim, "embedding dimension")
      ->check(CLI::Range(1u, 4096u))
      ->capture_default_str();
  cmd->add_option("--epochs", a->epochs, "passes over the training pairs")
      ->check(CLI::Range(1u, 100000u))
      ->capture_default_str();
  cmd->add_option("--cpr-k", a->cpr_k, "CPR sample size: interactions crossed per sample")
      ->check(CLI::Range(2u, 8u))
      ->capture_default_str();
  cmd->add_option("--cpr-k3-share", a->cpr_k3_share, "CPR: share of 3-interaction samples mixed in")
      ->check(CLI::Range(0.0, 1.0))
      ->capture_default_str();
  cmd->add_option("--beta", a->beta,
                  "dynamic sampling: candidates drawn per kept sample (1 = plain)")
      ->check(CLI::Range(1.0, 1000.0))
      ->capture_default_str();
  cmd->add_option("--learning-rate", a->learning_rate, "step size")
      ->check(CLI::PositiveNumber)
      ->capture_default_str();
  cmd->add_option("--l2", a->l2, "L2 regularisation of touched rows")
      ->check(CLI::NonNegativeNumber)
      ->capture_default_str();
  cmd->add_option("--optimizer", a->optimizer, "sgd or adagrad")
      ->check(CLI::IsMember({"sgd", "adagrad"}))
      ->capture_default_str();
  cmd->add_option("--batch-size", a->batch_size, "samples per mini-batch")
      ->check(CLI::Range(1u, 1u << 24))
      ->capture_default_str();
  cmd->add_option("--threads", a->threads, "training threads")
      ->check(CLI::Range(1u, 256u))
      ->capture_default_str();
  cmd->add_option("--seed", a->seed, "random seed")->capture_default_str();
}

}  // namespace

int main(int argc, char** argv) {
  CLI::App app{
      "plumb: fit, evaluate and manage embedding versions offline.\n"
      "Exit status: 0 done, 1 failed (reason on stderr), 2 usage error.",
      "plumb"};
  app.require_subcommand(1);
  app.set_version_flag("--version", std::string("plumb ") + PLUMB_VERSION);

  trainer::SynthOptions synth;
  synth.users = 5000;
  synth.items = 2000;
  synth.target_interactions = 150000;
  std::string synth_out;
  auto* synth_cmd =
      app.add_subcommand("synth", "generate a biased demo world (a tool-lending library)");
  synth_cmd->add_option("--out", synth_out, "directory for events.csv, test.csv, items.csv")
      ->required();
  AddWorldOptions(synth_cmd, &synth);

  ImportArgs import;
  auto* import_cmd = app.add_subcommand("import", "append events from a CSV file to a store's log");
  import_cmd
      ->add_option("--events", import.events, "CSV with columns user,item[,ts][,weight][,event_id]")
      ->required()
      ->check(CLI::ExistingFile);
  import_cmd->add_option("--db", import.db, "store directory (created if missing)")->required();
  import_cmd->add_flag("--skip-bad", import.skip_bad,
                       "skip and count malformed lines instead of stopping");

  SplitArgs split;
  auto* split_cmd = app.add_subcommand(
      "split",
      "divide an event CSV by (user, item) pair into train.csv, test.csv and "
      "validation.csv: at random, by time per user, or debiased by inverse popularity");
  split_cmd
      ->add_option("--events", split.events, "CSV with columns user,item[,ts][,weight][,event_id]")
      ->required()
      ->check(CLI::ExistingFile);
  split_cmd->add_option("--out", split.out, "directory for train.csv, test.csv, validation.csv")
      ->required();
  split_cmd
      ->add_option("--kind", split.kind,
                   "random (pairs drawn uniformly), temporal (each user's latest pairs, by ts) "
                   "or debiased (random, then kept with probability proportional to 1 / item "
                   "popularity; the rest go back to training)")
      ->check(CLI::IsMember({"random", "temporal", "debiased"}))
      ->capture_default_str();
  split_cmd
      ->add_option("--holdout-fraction", split.holdout_fraction,
                   "share of pairs held out (temporal: of each user's pairs, leaving at least "
                   "one to train on)")
      ->check(CLI::Range(0.001, 0.999))
      ->capture_default_str();
  split_cmd
      ->add_option("--validation-fraction", split.validation_fraction,
                   "share of the held-out pairs written to validation.csv instead of test.csv")
      ->check(CLI::Range(0.0, 1.0))
      ->capture_default_str();
  split_cmd->add_option("--seed", split.seed, "random seed")->capture_default_str();
  split_cmd->add_flag("--skip-bad", split.skip_bad, "skip and count malformed lines");

  FitArgs fit;
  auto* fit_cmd =
      app.add_subcommand("fit", "import events (optional), train, publish and activate a version");
  fit_cmd->add_option("--events", fit.import.events, "CSV to import first (columns user,item[,ts])")
      ->check(CLI::ExistingFile);
  fit_cmd->add_option("--db", fit.import.db, "store directory (created if missing)")->required();
  fit_cmd->add_flag("--skip-bad", fit.import.skip_bad, "skip and count malformed CSV lines");
  AddTrainOptions(fit_cmd, &fit);
  fit_cmd
      ->add_option("--holdout-fraction", fit.holdout,
                   "share of pairs held out for validation (first fit only)")
      ->check(CLI::Range(0.0, 0.5))
      ->capture_default_str();
  fit_cmd
      ->add_option("--keep-versions", fit.keep_versions, "newest versions always kept in the store")
      ->capture_default_str();
  fit_cmd
      ->add_option("--keep-versions-for", fit.keep_versions_for,
                   "also keep every version younger than this (30m, 2h, 7d; 0 = by count only)")
      ->capture_default_str();
  fit_cmd
      ->add_option("--training-window", fit.training_window,
                   "train only on pairs whose latest event is this recent, measured back from "
                   "the newest event (30d, 12h; 0 = all history)")
      ->capture_default_str();
  fit_cmd->add_flag("--activate,!--no-activate", fit.activate,
                    "activate the published version (--no-activate: publish only)");

  TuneArgs tune;
  tune.fit.holdout = 0.1;
  auto* tune_cmd = app.add_subcommand(
      "tune", "choose CPR's debiasing strength (beta) on a debiased validation split");
  tune_cmd
      ->add_option("--events", tune.fit.import.events,
                   "CSV to import first (columns user,item[,ts])")
      ->check(CLI::ExistingFile);
  auto* tune_db = tune_cmd->add_option(
      "--db", tune.fit.import.db,
      "store directory (created if missing; without it, --events go into a temporary store)");
  tune_cmd->add_flag("--skip-bad", tune.fit.import.skip_bad, "skip and count malformed CSV lines");
  AddTrainOptions(tune_cmd, &tune.fit);
  tune_cmd
      ->add_option("--holdout-fraction", tune.fit.holdout,
                   "share of pairs held out for validation (a new store; an existing store "
                   "keeps its own)")
      ->check(CLI::Range(0.01, 0.5))
      ->capture_default_str();
  tune_cmd->add_option("--tune-betas", tune.betas, "betas to try (comma-separated)")
      ->delimiter(',')
      ->check(CLI::Range(1.0, 100.0))
      ->default_str("1,2,3,5");
  tune_cmd
      ->add_option("--tune-k3-shares", tune.k3_shares,
                   "shares of k = 3 samples to try with each beta (comma-separated)")
      ->delimiter(',')
      ->check(CLI::Range(0.0, 1.0))
      ->default_str("0");
  tune_cmd->add_option("--k", tune.k, "cut-off K of the validation figures")->capture_default_str();
  tune_cmd->add_option("--groups", tune.groups, "popularity groups")->capture_default_str();
  tune_cmd
      ->add_flag("--publish,!--no-publish", tune.publish,
                 "publish the chosen candidate as a version (default: print the table only)")
      ->needs(tune_db);
  tune_cmd->add_flag("--activate,!--no-activate", tune.fit.activate,
                     "activate what --publish writes");

  EvalArgs eval;
  auto* eval_cmd = app.add_subcommand(
      "eval", "Recall, NDCG, ARP, Gini, coverage, group shares of versions on a test file");
  eval_cmd->add_option("--db", eval.db, "store directory")->required();
  eval_cmd->add_option("--test", eval.test, "CSV with columns user,item")
      ->required()
      ->check(CLI::ExistingFile);
  eval_cmd
      ->add_option("--model-version", eval.versions,
                   "version to evaluate (default: the active one); repeat it or give a "
                   "comma-separated list to evaluate several side by side")
      ->delimiter(',');
  eval_cmd->add_option("--k", eval.k, "cut-off K")->capture_default_str();
  eval_cmd->add_option("--groups", eval.groups, "popularity groups")->capture_default_str();
  eval_cmd->add_option("--threads", eval.threads, "scoring threads")->capture_default_str();
  eval_cmd->add_flag("--json", eval.json, "print JSON instead of a table");

  CompareArgs compare;
  compare.world = synth;
  auto* compare_cmd = app.add_subcommand(
      "compare",
      "fit CPR, BPR and BCE on a synthetic world, or on your own events, and compare "
      "them (with the truth, on a synthetic world)");
  AddWorldOptions(compare_cmd, &compare.world);
  auto* compare_events =
      compare_cmd
          ->add_option("--events", compare.events,
                       "fit on this event CSV instead of a synthetic world (columns user,item; "
                       "needs --test; no truth column then)")
          ->check(CLI::ExistingFile);
  auto* compare_test =
      compare_cmd
          ->add_option("--test", compare.test, "with --events: the test CSV (columns user,item)")
          ->check(CLI::ExistingFile);
  compare_events->needs(compare_test);
  compare_test->needs(compare_events);
  // A world's shape means nothing for the user's own events: refuse the mixture.
  for (const char* world_flag : {"--users", "--items", "--interactions", "--alpha", "--zipf",
                                 "--test-per-user", "--drift", "--drift-at", "--drift-strength",
                                 "--appeal-spread", "--appeal-visibility", "--arrival-span"}) {
    compare_events->excludes(compare_cmd->get_option(world_flag));
  }
  compare_cmd->add_flag("--skip-bad", compare.skip_bad,
                        "with --events: skip and count malformed lines");
  compare_cmd->add_option("--dim", compare.dim, "embedding dimension")->capture_default_str();
  compare_cmd->add_option("--epochs", compare.epochs, "epochs per objective")
      ->capture_default_str();
  compare_cmd->add_option("--beta", compare.beta, "CPR's dynamic-sampling beta")
      ->capture_default_str();
  compare_cmd->add_option("--threads", compare.threads, "threads")->capture_default_str();
  compare_cmd->add_option("--k", compare.k, "cut-off K")->capture_default_str();
  compare_cmd->add_option("--groups", compare.groups, "popularity groups")->capture_default_str();
  compare_cmd->add_flag("--json", compare.json, "print JSON instead of a table");

  AdminArgs admin;
  auto* versions_cmd = app.add_subcommand("versions", "list the kept embedding versions");
  versions_cmd->add_option("--db", admin.db, "store directory")->required();
  auto* activate_cmd =
      app.add_subcommand("activate", "make a kept version active (promote or roll back)");
  activate_cmd->add_option("--db", admin.db, "store directory")->required();
  activate_cmd->add_option("--model-version", admin.version, "version number")->required();
  auto* pin_cmd = app.add_subcommand("pin", "pin a kept version: never pruned, whatever its age");
  pin_cmd->add_option("--db", admin.db, "store directory")->required();
  pin_cmd->add_option("--model-version", admin.version, "version number")->required();
  auto* unpin_cmd = app.add_subcommand("unpin", "unpin a version: the retention rules apply again");
  unpin_cmd->add_option("--db", admin.db, "store directory")->required();
  unpin_cmd->add_option("--model-version", admin.version, "version number")->required();
  auto* inspect_cmd =
      app.add_subcommand("inspect", "summarise a store: log, cursor, ids, versions");
  inspect_cmd->add_option("--db", admin.db, "store directory")->required();
  inspect_cmd->add_flag("--verify", admin.verify,
                        "read every block and record; exit non-zero when anything is damaged");
  auto* repair_cmd = app.add_subcommand(
      "repair",
      "recover a damaged store: set unreadable files aside, keep every readable record, "
      "drop incomplete versions (plumb-train must be stopped)");
  repair_cmd->add_option("--db", admin.db, "store directory")->required();
  auto* forget_cmd = app.add_subcommand(
      "forget",
      "erase a user: their events, interactions and id from the log, their row from "
      "every kept version (plumb-train must be stopped)");
  forget_cmd->add_option("--db", admin.db, "store directory")->required();
  forget_cmd->add_option("--user", admin.users, "external user id (repeatable)")->required();
  auto* export_cmd = app.add_subcommand(
      "export",
      "write a version as users.tsv and items.tsv (tab-separated, header user|item, d0..)");
  export_cmd->add_option("--db", admin.db, "store directory")->required();
  export_cmd->add_option("--out", admin.out, "output directory")->required();
  export_cmd->add_option("--model-version", admin.version, "version (default: the active one)");

  TopArgs top;
  auto* top_cmd = app.add_subcommand("top", "a user's top-N list from a stored version, offline");
  top_cmd->add_option("--db", top.db, "store directory")->required();
  top_cmd->add_option("--user", top.users, "external user id (repeatable)")->required();
  top_cmd->add_option("--count", top.count, "list length")->capture_default_str();
  top_cmd->add_option("--model-version", top.version, "version (default: the active one)");
  top_cmd->add_option("--names", top.names, "CSV `item,name` to show item names")
      ->check(CLI::ExistingFile);
  top_cmd->add_flag("--include-seen", top.include_seen,
                    "also list items the user already had (default: left out)");

  try {
    app.parse(argc, argv);
  } catch (const CLI::ParseError& e) {
    // --help and --version exit 0; every other parse error is a usage error: exit 2.
    return app.exit(e) == 0 ? 0 : 2;
  }

  Status s;
  if (*synth_cmd)
    s = RunSynth(synth, synth_out);
  else if (*import_cmd)
    s = RunImport(import);
  else if (*split_cmd)
    s = RunSplit(split);
  else if (*fit_cmd)
    s = RunFit(fit);
  else if (*eval_cmd)
    s = RunEval(eval);
  else if (*compare_cmd)
    s = RunCompare(compare);
  else if (*tune_cmd)
    s = RunTune(tune);
  else if (*versions_cmd)
    s = RunVersions(admin);
  else if (*activate_cmd)
    s = RunActivate(admin);
  else if (*pin_cmd)
    s = RunPin(admin, true);
  else if (*unpin_cmd)
    s = RunPin(admin, false);
  else if (*inspect_cmd)
    s = RunInspect(admin);
  else if (*repair_cmd)
    s = RunRepair(admin);
  else if (*forget_cmd)
    s = RunForget(admin);
  else if (*export_cmd)
    s = RunExport(admin);
  else if (*top_cmd)
    s = RunTop(top);
  if (!s.ok()) {
    std::fprintf(stderr, "plumb: %s\n", s.ToString().c_str());
    return 1;
  }
  return 0;
}
