// plumb eval: stored versions side by side against a test file. plumb compare: CPR, BPR and
// BCE fitted side by side on a synthetic world, beside the ranking by true relevance, or on
// the user's own events and test file.
#include <algorithm>
#include <chrono>
#include <cstdio>
#include <fstream>
#include <limits>
#include <unordered_map>

#include "cli/commands.h"
#include "cli/csv_reader.h"
#include "cli/eval_checks.h"
#include "cli/report_format.h"
#include "cli/store_access.h"
#include "trainer/evaluate.h"
#include "trainer/rng.h"
#include "trainer/tuner.h"

namespace plumb::cli {

namespace {

void Say(const char* who, const std::string& message) {
  if (!message.empty()) std::fprintf(stderr, "%s: %s\n", who, message.c_str());
}

std::string VersionLabel(const store::VersionManifest& m) {
  std::string label = "v" + std::to_string(m.version) + " " + m.objective;
  if (m.objective == "cpr" && m.training.known()) {
    char beta[32];
    std::snprintf(beta, sizeof beta, " b=%g", m.training.beta);
    label += beta;
  }
  return label;
}

}  // namespace

Status RunEval(const EvalArgs& args) {
  std::unique_ptr<store::Store> store;
  PLUMB_RETURN_IF_ERROR(OpenForRead(args.db, &store));
  // The versions in the order given, each once; none (or 0) means the active one.
  std::vector<uint64_t> wanted;
  for (uint64_t v : args.versions) {
    if (std::find(wanted.begin(), wanted.end(), v) == wanted.end()) wanted.push_back(v);
  }
  if (wanted.empty()) wanted.push_back(0);
  std::vector<LoadedModel> models(wanted.size());
  for (size_t m = 0; m < wanted.size(); ++m) {
    PLUMB_RETURN_IF_ERROR(LoadModel(*store, wanted[m], &models[m]));
  }

  std::vector<CsvEvent> rows;
  CsvReadReport read;
  PLUMB_RETURN_IF_ERROR(ReadEventCsv(args.test, CsvReadOptions{}, &rows, &read));
  // Only pairs every version knows, so that the columns compare the same test.
  std::vector<std::unordered_map<std::string, uint32_t>> user_index(models.size()),
      item_index(models.size());
  for (size_t m = 0; m < models.size(); ++m) {
    for (uint32_t u = 0; u < models[m].user_ids.size(); ++u)
      user_index[m].emplace(models[m].user_ids[u], u);
    for (uint32_t i = 0; i < models[m].item_ids.size(); ++i)
      item_index[m].emplace(models[m].item_ids[i], i);
  }
  std::vector<std::vector<trainer::Pair>> test(models.size());
  uint64_t unknown = 0;
  for (const CsvEvent& r : rows) {
    std::vector<trainer::Pair> mapped;
    for (size_t m = 0; m < models.size(); ++m) {
      auto u = user_index[m].find(r.user);
      auto i = item_index[m].find(r.item);
      if (u == user_index[m].end() || i == item_index[m].end()) break;
      mapped.push_back({u->second, i->second});
    }
    if (mapped.size() < models.size()) {
      ++unknown;
      continue;
    }
    for (size_t m = 0; m < models.size(); ++m) test[m].push_back(mapped[m]);
  }
  if (unknown > 0) {
    std::string which;
    for (const LoadedModel& m : models) {
      which += (which.empty() ? "" : ", ") + std::to_string(m.manifest.version);
    }
    std::fprintf(stderr,
                 "eval: %llu of %zu test pairs name a user or item that version%s %s "
                 "%s know; they are left out%s\n",
                 static_cast<unsigned long long>(unknown), rows.size(),
                 models.size() > 1 ? "s" : "", which.c_str(),
                 models.size() > 1 ? "do not all" : "does not",
                 models.size() > 1 ? " of every column" : "");
  }
  if (test[0].empty()) return Status::InvalidArgument(args.test + ": no test pair the model knows");

  trainer::EvalOptions opt;
  opt.k = args.k;
  opt.num_groups = args.groups;
  opt.threads = args.threads;
  std::vector<LabelledReport> reports;
  for (size_t m = 0; m < models.size(); ++m) {
    const LoadedModel& loaded = models[m];
    const std::string name = "version " + std::to_string(loaded.manifest.version);
    Say("eval", LargeKWarning(args.k, loaded.model.num_items()));
    Say("eval",
        TrainingOverlapWarning(CountTrainingPairs(loaded.train, test[m]), test[m].size(), name));
    RankingReport report;
    PLUMB_RETURN_IF_ERROR(
        trainer::EvaluateModel(loaded.model, loaded.train, test[m], opt, &report));
    if (m > 0 && report.test_group_shares != reports.front().second.test_group_shares) {
      std::fprintf(stderr,
                   "eval: note: %s was trained on other interactions than version %llu, "
                   "so its popularity groups are cut differently; the test column shows version "
                   "%llu's\n",
                   name.c_str(), static_cast<unsigned long long>(models[0].manifest.version),
                   static_cast<unsigned long long>(models[0].manifest.version));
    }
    reports.emplace_back(VersionLabel(loaded.manifest), std::move(report));
  }
  std::fputs(args.json ? FormatReportJson(reports).c_str() : FormatReportTable(reports).c_str(),
             stdout);
  return Status::Ok();
}

namespace {

// compare --events FILE --test FILE: the user's events as training pairs (ids numbered in
// order of first appearance) and the test pairs whose user and item the events name.
Status LoadOwnData(const CompareArgs& args, trainer::Interactions* train,
                   std::vector<trainer::Pair>* test) {
  std::vector<CsvEvent> rows;
  PLUMB_RETURN_IF_ERROR(ReadEventCsvTelling("compare", args.events, args.skip_bad, &rows));
  std::unordered_map<std::string, uint32_t> users, items;
  std::vector<trainer::Pair> pairs;
  pairs.reserve(rows.size());
  for (const CsvEvent& r : rows) {
    const uint32_t u = users.try_emplace(r.user, static_cast<uint32_t>(users.size())).first->second;
    const uint32_t i = items.try_emplace(r.item, static_cast<uint32_t>(items.size())).first->second;
    pairs.push_back({u, i});
  }
  if (pairs.empty()) return Status::InvalidArgument(args.events + ": no events");
  PLUMB_RETURN_IF_ERROR(trainer::Interactions::Build(pairs, static_cast<uint32_t>(users.size()),
                                                     static_cast<uint32_t>(items.size()), train));
  CsvReadReport report;
  PLUMB_RETURN_IF_ERROR(ReadEventCsv(args.test, CsvReadOptions{}, &rows, &report));
  test->clear();
  uint64_t unknown = 0;
  for (const CsvEvent& r : rows) {
    auto u = users.find(r.user);
    auto i = items.find(r.item);
    if (u == users.end() || i == items.end()) {
      ++unknown;
      continue;
    }
    test->push_back({u->second, i->second});
  }
  if (unknown > 0) {
    std::fprintf(stderr,
                 "compare: %llu of %zu test pairs name a user or item that %s does not "
                 "hold; they are left out\n",
                 static_cast<unsigned long long>(unknown), rows.size(), args.events.c_str());
  }
  if (test->empty()) {
    return Status::InvalidArgument(args.test + ": no test pair whose user and item are in " +
                                   args.events);
  }
  Say("compare", TrainingOverlapWarning(CountTrainingPairs(*train, *test), test->size(),
                                        "the events (" + args.events + ")"));
  return Status::Ok();
}

}  // namespace

Status RunCompare(const CompareArgs& args) {
  const bool own = !args.events.empty();
  trainer::SynthWorld world;
  trainer::Interactions train;
  std::vector<trainer::Pair> test;
  if (own) {
    if (args.test.empty()) return Status::InvalidArgument("--events needs --test");
    PLUMB_RETURN_IF_ERROR(LoadOwnData(args, &train, &test));
    std::fprintf(stderr,
                 "compare: %u users, %u items, %zu training pairs from %s; %zu test pairs "
                 "from %s (no true relevance: no truth column)\n",
                 train.num_users(), train.num_items(), train.size(), args.events.c_str(),
                 test.size(), args.test.c_str());
  } else {
    std::fprintf(stderr,
                 "compare: generating a lending-library world: %u members, %u tools, "
                 "about %llu borrowings (seed %llu)\n",
                 args.world.users, args.world.items,
                 static_cast<unsigned long long>(args.world.target_interactions),
                 static_cast<unsigned long long>(args.world.seed));
    PLUMB_RETURN_IF_ERROR(trainer::GenerateSynthWorld(args.world, &world));
    PLUMB_RETURN_IF_ERROR(world.TrainInteractions(&train));
    test = world.test;
    std::fprintf(stderr, "compare: %zu training pairs, %zu ground-truth test pairs\n", train.size(),
                 test.size());
  }
  Say("compare", LargeKWarning(args.k, train.num_items()));

  trainer::EvalOptions eval;
  eval.k = args.k;
  eval.num_groups = args.groups;
  eval.threads = args.threads;

  struct Run {
    std::string label;
    std::string objective;
    double beta;
  };
  const std::vector<Run> runs = {
      {"cpr b=" + std::to_string(static_cast<int>(args.beta)), "cpr", args.beta},
      {"cpr b=1", "cpr", 1.0},
      {"bpr", "bpr", 1.0},
      {"bce", "bce", 1.0},
  };
  std::vector<LabelledReport> reports;
  std::vector<Run> all_runs = runs;
  std::string tune_json;
  if (args.tune) {
    // Hold out a random share of the pairs, choose beta on them, refit on everything.
    trainer::Rng rng(trainer::mix_seed(args.world.seed, 0x74756e65));
    std::vector<trainer::Pair> kept, held;
    for (const trainer::Pair& p : train.pairs()) {
      (rng.UniformDouble() < args.tune_holdout ? held : kept).push_back(p);
    }
    trainer::Interactions part;
    PLUMB_RETURN_IF_ERROR(
        trainer::Interactions::Build(kept, train.num_users(), train.num_items(), &part));
    const trainer::ValidationSample sample =
        trainer::BuildValidationSample(part, held, std::numeric_limits<size_t>::max());
    FitArgs fa;
    fa.dim = args.dim;
    fa.epochs = args.epochs;
    fa.threads = args.threads;
    fa.seed = args.world.seed;
    trainer::TrainOptions base;
    PLUMB_RETURN_IF_ERROR(trainer::MakeTrainOptions(fa, &base));
    std::vector<trainer::TuneCandidate> candidates;
    for (double b : args.tune_betas) candidates.push_back({b, 0.0});
    trainer::TuneOptions topt;
    topt.dim = args.dim;
    topt.epochs = args.epochs;
    topt.k = args.k;
    topt.groups = args.groups;
    trainer::TuneResult tuned;
    // Each candidate (fitted on the training part) is also scored against the truth: what
    // validation could not see, for judging the choice.
    tune_json = "\"tune\":[";
    auto score_truth = [&](const trainer::TuneRow& row, const trainer::Embeddings& model) {
      RankingReport r;
      if (!trainer::EvaluateModel(model, part, test, eval, &r).ok()) return false;
      char buf[512];
      std::snprintf(buf, sizeof buf,
                    "%s{\"beta\":%g,\"validation_recall\":%.6f,\"validation_shift\":%.6f,"
                    "\"validation_distance\":%.6f,\"validation_hits\":\"%s\","
                    "\"truth_test_recall\":%.6f,"
                    "\"truth_test_arp\":%.3f,\"group_shares\":[",
                    tune_json.back() == '[' ? "" : ",", row.candidate.beta, row.scores.recall,
                    row.scores.shift.shift, row.scores.shift.distance, "HITS", r.recall, r.arp);
      std::string text = buf;
      std::string hits;
      for (uint8_t h : row.scores.hits) hits += h ? '1' : '0';
      text.replace(text.find("HITS"), 4, hits);
      tune_json += text;
      for (size_t g = 0; g < r.rec_group_shares.size(); ++g) {
        std::snprintf(buf, sizeof buf, "%s%.6f", g ? "," : "", r.rec_group_shares[g]);
        tune_json += buf;
      }
      tune_json += "]}";
      return true;
    };
    PLUMB_RETURN_IF_ERROR(
        trainer::Tune(part, sample, base, candidates, topt, score_truth, &tuned));
    char chosen[64];
    std::snprintf(chosen, sizeof chosen, "],\"tune_chosen_beta\":%g,\"validation_weights\":[",
                  tuned.report.rows[tuned.report.chosen].candidate.beta);
    tune_json += chosen;
    for (size_t p = 0; p < sample.weights.size(); ++p) {
      std::snprintf(chosen, sizeof chosen, "%s%.6g", p ? "," : "", sample.weights[p]);
      tune_json += chosen;
    }
    tune_json += "]";
    std::fputs(FormatTuneTable(tuned.report, args.k).c_str(), stderr);
    const double beta = tuned.report.rows[tuned.report.chosen].candidate.beta;
    all_runs.push_back({"cpr tuned", "cpr", beta});
  }
  for (const Run& run : all_runs) {
    FitArgs fa;
    fa.objective = run.objective;
    fa.beta = run.beta;
    fa.dim = args.dim;
    fa.epochs = args.epochs;
    fa.threads = args.threads;
    fa.seed = args.world.seed;
    trainer::TrainOptions to;
    PLUMB_RETURN_IF_ERROR(trainer::MakeTrainOptions(fa, &to));
    trainer::Embeddings model;
    PLUMB_RETURN_IF_ERROR(trainer::Embeddings::Create(args.dim, train.num_users(),
                                                      train.num_items(), fa.seed, &model));
    std::unique_ptr<trainer::FitLoop> fit;
    PLUMB_RETURN_IF_ERROR(trainer::FitLoop::Create(to, &model, &train, &fit));
    const auto t0 = std::chrono::steady_clock::now();
    PLUMB_RETURN_IF_ERROR(fit->RunEpochs(args.epochs));
    const double s = std::chrono::duration<double>(std::chrono::steady_clock::now() - t0).count();
    RankingReport r;
    PLUMB_RETURN_IF_ERROR(trainer::EvaluateModel(model, train, test, eval, &r));
    std::fprintf(stderr, "compare: %-9s (beta %g) fitted in %5.1f s, Recall@%u %.4f\n",
                 run.label.c_str(), run.beta, s, args.k, r.recall);
    reports.emplace_back(run.label, std::move(r));
  }
  if (!own) {
    RankingReport truth;
    PLUMB_RETURN_IF_ERROR(trainer::EvaluateScorer(
        [&world](uint32_t u, std::span<float> scores) { world.TrueScores(u, scores); },
        train.num_items(), train, test, eval, &truth));
    reports.emplace_back("truth", std::move(truth));
  }
  std::fputs(args.json ? FormatReportJson(reports, tune_json).c_str()
                       : FormatReportTable(reports).c_str(),
             stdout);
  return Status::Ok();
}

}  // namespace plumb::cli
