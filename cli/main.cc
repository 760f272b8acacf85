// plumb: the offline command line. `plumb --help` lists the commands, `plumb CMD --help`
// their options.
#include <cstdio>

#include <CLI/CLI.hpp>

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
}

void AddTrainOptions(CLI::App* cmd, FitArgs* a) {
  cmd->add_option("--objective", a->objective, "cpr, bpr or bce")
      ->check(CLI::IsMember({"cpr", "bpr", "bce"}))
      ->capture_default_str();
  cmd->add_option("--dim", a->dim, "embedding dimension")->capture_default_str();
  cmd->add_option("--epochs", a->epochs, "passes over the training pairs")->capture_default_str();
  cmd->add_option("--k", a->k, "CPR: interactions per sample")->capture_default_str();
  cmd->add_option("--k3-share", a->k3_share, "CPR: share of 3-interaction samples mixed in")
      ->capture_default_str();
  cmd->add_option("--beta", a->beta, "dynamic sampling: candidates drawn per kept sample (1 = plain)")
      ->capture_default_str();
  cmd->add_option("--learning-rate", a->learning_rate, "step size")->capture_default_str();
  cmd->add_option("--l2", a->l2, "L2 regularisation of touched rows")->capture_default_str();
  cmd->add_option("--optimizer", a->optimizer, "sgd or adagrad")
      ->check(CLI::IsMember({"sgd", "adagrad"}))
      ->capture_default_str();
  cmd->add_option("--batch-size", a->batch_size, "samples per mini-batch")->capture_default_str();
  cmd->add_option("--threads", a->threads, "training threads")->capture_default_str();
  cmd->add_option("--seed", a->seed, "random seed")->capture_default_str();
}

}  // namespace

int main(int argc, char** argv) {
  CLI::App app{"plumb: fit, evaluate and manage embedding versions offline"};
  app.require_subcommand(1);
  app.set_version_flag("--version", "plumb 0.1.0");

  trainer::SynthOptions synth;
  synth.users = 5000;
  synth.items = 2000;
  synth.target_interactions = 150000;
  std::string synth_out;
  auto* synth_cmd = app.add_subcommand("synth", "generate a biased demo world (a tool-lending library)");
  synth_cmd->add_option("--out", synth_out, "directory for events.csv, test.csv, items.csv")->required();
  AddWorldOptions(synth_cmd, &synth);

  ImportArgs import;
  auto* import_cmd = app.add_subcommand("import", "append events from a CSV file to a store's log");
  import_cmd->add_option("--events", import.events, "CSV with columns user,item[,ts][,weight][,event_id]")
      ->required()->check(CLI::ExistingFile);
  import_cmd->add_option("--db", import.db, "store directory (created if missing)")->required();
  import_cmd->add_flag("--skip-bad", import.skip_bad, "skip and count malformed lines instead of stopping");

  FitArgs fit;
  auto* fit_cmd = app.add_subcommand("fit", "import events (optional), train, publish and activate a version");
  fit_cmd->add_option("--events", fit.import.events, "CSV to import first (columns user,item[,ts])")
      ->check(CLI::ExistingFile);
  fit_cmd->add_option("--db", fit.import.db, "store directory (created if missing)")->required();
  fit_cmd->add_flag("--skip-bad", fit.import.skip_bad, "skip and count malformed CSV lines");
  AddTrainOptions(fit_cmd, &fit);
  fit_cmd->add_option("--holdout", fit.holdout, "share of pairs held out for validation (first fit only)")
      ->capture_default_str();
  fit_cmd->add_option("--keep-versions", fit.keep_versions, "versions kept in the store")->capture_default_str();
  bool no_activate = false;
  fit_cmd->add_flag("--no-activate", no_activate, "publish without activating");

  EvalArgs eval;
  auto* eval_cmd = app.add_subcommand("eval", "Recall, NDCG, ARP, Gini, coverage, group shares on a test file");
  eval_cmd->add_option("--db", eval.db, "store directory")->required();
  eval_cmd->add_option("--test", eval.test, "CSV with columns user,item")->required()->check(CLI::ExistingFile);
  eval_cmd->add_option("--version", eval.version, "version to evaluate (default: the active one)");
  eval_cmd->add_option("--k", eval.k, "cut-off K")->capture_default_str();
  eval_cmd->add_option("--groups", eval.groups, "popularity groups")->capture_default_str();
  eval_cmd->add_option("--threads", eval.threads, "scoring threads")->capture_default_str();
  eval_cmd->add_flag("--json", eval.json, "print JSON instead of a table");

  CompareArgs compare;
  compare.world = synth;
  auto* compare_cmd = app.add_subcommand(
      "compare", "fit CPR, BPR and BCE on a synthetic world and compare them with the truth");
  AddWorldOptions(compare_cmd, &compare.world);
  compare_cmd->add_option("--dim", compare.dim, "embedding dimension")->capture_default_str();
  compare_cmd->add_option("--epochs", compare.epochs, "epochs per objective")->capture_default_str();
  compare_cmd->add_option("--beta", compare.beta, "CPR's dynamic-sampling beta")->capture_default_str();
  compare_cmd->add_option("--threads", compare.threads, "threads")->capture_default_str();
  compare_cmd->add_option("--k", compare.k, "cut-off K")->capture_default_str();
  compare_cmd->add_option("--groups", compare.groups, "popularity groups")->capture_default_str();
  compare_cmd->add_flag("--json", compare.json, "print JSON instead of a table");

  AdminArgs admin;
  auto* versions_cmd = app.add_subcommand("versions", "list the kept embedding versions");
  versions_cmd->add_option("--db", admin.db, "store directory")->required();
  auto* activate_cmd = app.add_subcommand("activate", "make a kept version active (promote or roll back)");
  activate_cmd->add_option("--db", admin.db, "store directory")->required();
  activate_cmd->add_option("--version", admin.version, "version number")->required();
  auto* inspect_cmd = app.add_subcommand("inspect", "summarise a store: log, cursor, ids, versions");
  inspect_cmd->add_option("--db", admin.db, "store directory")->required();
  inspect_cmd->add_flag("--verify", admin.verify,
                        "read every block and record; exit non-zero when anything is damaged");
  auto* repair_cmd = app.add_subcommand(
      "repair", "recover a damaged store: set unreadable files aside, keep every readable record, "
                "drop incomplete versions (plumb-train must be stopped)");
  repair_cmd->add_option("--db", admin.db, "store directory")->required();
  auto* forget_cmd = app.add_subcommand(
      "forget", "erase a user: their events, interactions and id from the log, their row from "
                "every kept version (plumb-train must be stopped)");
  forget_cmd->add_option("--db", admin.db, "store directory")->required();
  forget_cmd->add_option("--user", admin.users, "external user id (repeatable)")->required();
  auto* export_cmd = app.add_subcommand("export", "write a version as users.tsv and items.tsv");
  export_cmd->add_option("--db", admin.db, "store directory")->required();
  export_cmd->add_option("--out", admin.out, "output directory")->required();
  export_cmd->add_option("--version", admin.version, "version (default: the active one)");

  TopArgs top;
  auto* top_cmd = app.add_subcommand("top", "a user's top-N list from a stored version, offline");
  top_cmd->add_option("--db", top.db, "store directory")->required();
  top_cmd->add_option("--user", top.users, "external user id (repeatable)")->required();
  top_cmd->add_option("--count", top.count, "list length")->capture_default_str();
  top_cmd->add_option("--version", top.version, "version (default: the active one)");
  top_cmd->add_option("--names", top.names, "CSV `item,name` to show item names")
      ->check(CLI::ExistingFile);

  CLI11_PARSE(app, argc, argv);

  Status s;
  if (*synth_cmd) s = RunSynth(synth, synth_out);
  else if (*import_cmd) s = RunImport(import);
  else if (*fit_cmd) {
    fit.activate = !no_activate;
    s = RunFit(fit);
  } else if (*eval_cmd) s = RunEval(eval);
  else if (*compare_cmd) s = RunCompare(compare);
  else if (*versions_cmd) s = RunVersions(admin);
  else if (*activate_cmd) s = RunActivate(admin);
  else if (*inspect_cmd) s = RunInspect(admin);
  else if (*repair_cmd) s = RunRepair(admin);
  else if (*forget_cmd) s = RunForget(admin);
  else if (*export_cmd) s = RunExport(admin);
  else if (*top_cmd) s = RunTop(top);
  if (!s.ok()) {
    std::fprintf(stderr, "plumb: %s\n", s.ToString().c_str());
    return 1;
  }
  return 0;
}
