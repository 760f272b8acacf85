#include "bench/server/catalogue_world.h"

#include <algorithm>
#include <chrono>
#include <cmath>
#include <cstdio>
#include <fstream>
#include <random>
#include <string>
#include <vector>

#include "trainer/embeddings.h"
#include "trainer/synth.h"
#include "trainer/trainer.h"

namespace plumb::server {

using Clock = std::chrono::steady_clock;

double SecondsSince(Clock::time_point since) {
  return std::chrono::duration<double>(Clock::now() - since).count();
}

std::string Milliseconds(int64_t ns) {
  char buf[32];
  std::snprintf(buf, sizeof buf, "%.3f", ns / 1e6);
  return buf;
}

double WorstGroupChange(const std::vector<double>& shares, const std::vector<double>& exact) {
  double worst = 0;
  for (size_t g = 0; g < shares.size() && g < exact.size(); ++g) {
    if (exact[g] >= 0.02) worst = std::max(worst, std::abs(shares[g] / exact[g] - 1));
  }
  return worst;
}

std::pair<double, double> ProcessRssMb() {
  std::ifstream status("/proc/self/status");
  std::string line;
  double rss = 0, hwm = 0;
  while (std::getline(status, line)) {
    if (line.starts_with("VmRSS:")) rss = std::stod(line.substr(6)) / 1024.0;
    if (line.starts_with("VmHWM:")) hwm = std::stod(line.substr(6)) / 1024.0;
  }
  return {rss, hwm};
}

Status FitCatalogueWorld(const CatalogueWorldOptions& a, SnapshotParts* p) {
  trainer::SynthOptions so;
  so.users = a.users;
  so.items = a.items;
  so.zipf = a.zipf;
  so.target_interactions = a.interactions;
  so.seed = a.seed;
  trainer::SynthWorld world;
  Clock::time_point t0 = Clock::now();
  PLUMB_RETURN_IF_ERROR(trainer::GenerateSynthWorld(so, &world));
  trainer::Interactions train;
  PLUMB_RETURN_IF_ERROR(world.TrainInteractions(&train));
  trainer::Embeddings model;
  PLUMB_RETURN_IF_ERROR(trainer::Embeddings::Create(a.dim, a.users, a.items, a.seed, &model));
  trainer::TrainOptions o;  // CPR, beta 3: plumb's default objective
  o.learning_rate = 0.05f;
  o.l2 = 1e-3f;
  o.batch_size = 256;
  o.threads = a.train_threads;
  std::unique_ptr<trainer::FitLoop> loop;
  PLUMB_RETURN_IF_ERROR(trainer::FitLoop::Create(o, &model, &train, &loop));
  std::printf("world: %u members x %u tools, %zu training pairs, dim %u; generated in %.1f s\n",
              a.users, a.items, train.size(), a.dim, SecondsSince(t0));
  t0 = Clock::now();
  for (uint32_t e = 0; e < a.epochs; ++e) {
    PLUMB_RETURN_IF_ERROR(loop->RunEpochs(1));
    std::printf("  CPR epoch %u/%u, %.0f s\n", e + 1, a.epochs, SecondsSince(t0));
    std::fflush(stdout);
  }
  const uint32_t dim = a.dim, base = a.items, items = base * a.tile;
  p->version = 1;
  p->items = ItemMatrix(items, dim);
  p->users = ItemMatrix(a.users, dim);
  std::copy(model.users().data(), model.users().data() + size_t{a.users} * dim, p->users.data());
  std::mt19937_64 rng(a.seed + 1);
  std::normal_distribution<float> gauss(0.0f, 1.0f);
  for (uint32_t c = 0; c < a.tile; ++c) {
    for (uint32_t i = 0; i < base; ++i) {
      const float* src = model.items().data() + size_t{i} * dim;
      float* dst = p->items.data() + (size_t{c} * base + i) * dim;
      double norm = 0;
      for (uint32_t d = 0; d < dim; ++d) norm += double{src[d]} * src[d];
      const float sigma = c == 0 ? 0.0f : static_cast<float>(a.tile_noise * std::sqrt(norm / dim));
      for (uint32_t d = 0; d < dim; ++d) dst[d] = src[d] + sigma * gauss(rng);
      p->item_ids.push_back(c == 0 ? trainer::ToolLabel(i)
                                   : trainer::ToolLabel(i) + "#" + std::to_string(c));
      p->item_degrees.push_back(train.item_degree(i));
    }
  }
  p->seen_offsets.push_back(0);
  for (uint32_t u = 0; u < a.users; ++u) {
    p->user_ids.push_back(trainer::MemberLabel(u));
    std::vector<uint32_t> seen(train.items_of(u).begin(), train.items_of(u).end());
    std::sort(seen.begin(), seen.end());
    p->seen_items.insert(p->seen_items.end(), seen.begin(), seen.end());
    p->seen_offsets.push_back(p->seen_items.size());
  }
  if (a.tile > 1) {
    std::printf(
        "catalogue tiled %u times to %u items (copies: the fitted rows plus Gaussian "
        "noise of %.0f %% of each row's RMS; same degrees)\n",
        a.tile, items, 100 * a.tile_noise);
  }
  return Status::Ok();
}

void AddCatalogueWorldOptions(CLI::App* app, CatalogueWorldOptions* w) {
  app->add_option("--users", w->users, "members of the synthetic world")->capture_default_str();
  app->add_option("--items", w->items, "tools fitted (before tiling)")->capture_default_str();
  app->add_option("--dim", w->dim, "embedding dimension")->capture_default_str();
  app->add_option("--interactions", w->interactions, "target training pairs")
      ->capture_default_str();
  app->add_option("--zipf", w->zipf, "popularity skew of the world")->capture_default_str();
  app->add_option("--epochs", w->epochs, "CPR epochs")->capture_default_str();
  app->add_option("--tile", w->tile, "repeat the fitted catalogue this many times")
      ->capture_default_str();
  app->add_option("--tile-noise", w->tile_noise, "noise of each copy, relative to the row's RMS")
      ->capture_default_str();
  app->add_option("--train-threads", w->train_threads, "threads fitting the world")
      ->capture_default_str();
  app->add_option("--seed", w->seed, "seed of the world and the queries")->capture_default_str();
}

}  // namespace plumb::server
