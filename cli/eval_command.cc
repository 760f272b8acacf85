// plumb eval: a stored version against a test file. plumb compare: CPR, BPR and BCE fitted
// side by side on a synthetic world, beside the ranking by true relevance.
#include <chrono>
#include <cstdio>
#include <fstream>
#include <unordered_map>

#include <limits>

#include "cli/commands.h"
#include "cli/csv_reader.h"
#include "cli/report_format.h"
#include "cli/store_access.h"
#include "trainer/evaluate.h"
#include "trainer/rng.h"
#include "trainer/tuner.h"

namespace plumb::cli {

Status RunEval(const EvalArgs& args) {
  std::unique_ptr<store::Store> store;
  PLUMB_RETURN_IF_ERROR(OpenForRead(args.db, &store));
  LoadedModel loaded;
  PLUMB_RETURN_IF_ERROR(LoadModel(*store, args.version, &loaded));

  std::vector<CsvEvent> rows;
  CsvReadReport read;
  PLUMB_RETURN_IF_ERROR(ReadEventCsv(args.test, CsvReadOptions{}, &rows, &read));
  std::unordered_map<std::string, uint32_t> user_index, item_index;
  for (uint32_t u = 0; u < loaded.user_ids.size(); ++u) user_index.emplace(loaded.user_ids[u], u);
  for (uint32_t i = 0; i < loaded.item_ids.size(); ++i) item_index.emplace(loaded.item_ids[i], i);
  std::vector<trainer::Pair> test;
  uint64_t unknown = 0;
  for (const CsvEvent& r : rows) {
    auto u = user_index.find(r.user);
    auto i = item_index.find(r.item);
    if (u == user_index.end() || i == item_index.end()) {
      ++unknown;
      continue;
    }
    test.push_back({u->second, i->second});
  }
  if (unknown > 0) {
    std::fprintf(stderr, "eval: %llu of %zu test pairs name a user or item version %llu does not "
                 "know; they are left out\n",
                 static_cast<unsigned long long>(unknown), rows.size(),
                 static_cast<unsigned long long>(loaded.manifest.version));
  }
  if (test.empty()) return Status::InvalidArgument(args.test + ": no test pair the model knows");

  trainer::EvalOptions opt;
  opt.k = args.k;
  opt.num_groups = args.groups;
  opt.threads = args.threads;
  RankingReport report;
  PLUMB_RETURN_IF_ERROR(trainer::EvaluateModel(loaded.model, loaded.train, test, opt, &report));
  const std::string label =
      "v" + std::to_string(loaded.manifest.version) + " " + loaded.manifest.objective;
  std::vector<LabelledReport> reports{{label, report}};
  std::fputs(args.json ? FormatReportJson(reports).c_str() : FormatReportTable(reports).c_str(),
             stdout);
  return Status::Ok();
}

Status RunCompare(const CompareArgs& args) {
  std::fprintf(stderr, "compare: generating a lending-library world: %u members, %u tools, "
               "about %llu borrowings (seed %llu)\n",
               args.world.users, args.world.items,
               static_cast<unsigned long long>(args.world.target_interactions),
               static_cast<unsigned long long>(args.world.seed));
  trainer::SynthWorld world;
  PLUMB_RETURN_IF_ERROR(trainer::GenerateSynthWorld(args.world, &world));
  trainer::Interactions train;
  PLUMB_RETURN_IF_ERROR(world.TrainInteractions(&train));
  std::fprintf(stderr, "compare: %zu training pairs, %zu ground-truth test pairs\n", train.size(),
               world.test.size());

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
    PLUMB_RETURN_IF_ERROR(MakeTrainOptions(fa, &base));
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
      if (!trainer::EvaluateModel(model, part, world.test, eval, &r).ok()) return false;
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
    PLUMB_RETURN_IF_ERROR(MakeTrainOptions(fa, &to));
    trainer::Embeddings model;
    PLUMB_RETURN_IF_ERROR(trainer::Embeddings::Create(args.dim, train.num_users(),
                                                      train.num_items(), fa.seed, &model));
    std::unique_ptr<trainer::FitLoop> fit;
    PLUMB_RETURN_IF_ERROR(trainer::FitLoop::Create(to, &model, &train, &fit));
    const auto t0 = std::chrono::steady_clock::now();
    PLUMB_RETURN_IF_ERROR(fit->RunEpochs(args.epochs));
    const double s = std::chrono::duration<double>(std::chrono::steady_clock::now() - t0).count();
    RankingReport r;
    PLUMB_RETURN_IF_ERROR(trainer::EvaluateModel(model, train, world.test, eval, &r));
    std::fprintf(stderr, "compare: %-9s (beta %g) fitted in %5.1f s, Recall@%u %.4f\n",
                 run.label.c_str(), run.beta, s, args.k, r.recall);
    reports.emplace_back(run.label, std::move(r));
  }
  RankingReport truth;
  PLUMB_RETURN_IF_ERROR(trainer::EvaluateScorer(
      [&world](uint32_t u, std::span<float> scores) { world.TrueScores(u, scores); },
      train.num_items(), train, world.test, eval, &truth));
  reports.emplace_back("truth", std::move(truth));
  std::fputs(args.json ? FormatReportJson(reports, tune_json).c_str()
                       : FormatReportTable(reports).c_str(),
             stdout);
  return Status::Ok();
}

}  // namespace plumb::cli
