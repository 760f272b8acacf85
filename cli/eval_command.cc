// plumb eval: a stored version against a test file. plumb compare: CPR, BPR and BCE fitted
// side by side on a synthetic world, beside the ranking by true relevance.
#include <chrono>
#include <cstdio>
#include <fstream>
#include <unordered_map>

#include "cli/commands.h"
#include "cli/csv_reader.h"
#include "cli/report_format.h"
#include "cli/store_access.h"
#include "trainer/evaluate.h"

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
  for (const Run& run : runs) {
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
    std::fprintf(stderr, "compare: %-8s fitted in %5.1f s, Recall@%u %.4f\n", run.label.c_str(),
                 s, args.k, r.recall);
    reports.emplace_back(run.label, std::move(r));
  }
  RankingReport truth;
  PLUMB_RETURN_IF_ERROR(trainer::EvaluateScorer(
      [&world](uint32_t u, std::span<float> scores) { world.TrueScores(u, scores); },
      train.num_items(), train, world.test, eval, &truth));
  reports.emplace_back("truth", std::move(truth));
  std::fputs(args.json ? FormatReportJson(reports).c_str() : FormatReportTable(reports).c_str(),
             stdout);
  return Status::Ok();
}

}  // namespace plumb::cli
