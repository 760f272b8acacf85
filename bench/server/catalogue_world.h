// The large catalogue the catalogue benchmarks share: a synthetic world (members x tools,
// Zipf-skewed popularity) fitted with CPR (plumb's default objective), so that the item
// vectors have a trained model's uneven norms; optionally tiled to sizes whose fit would take
// hours here (each copy the fitted rows plus Gaussian noise, same degrees).
#pragma once

#include <CLI/CLI.hpp>
#include <chrono>
#include <cstdint>
#include <string>
#include <utility>
#include <vector>

#include "core/status.h"
#include "server/snapshot.h"

namespace plumb::server {

struct CatalogueWorldOptions {
  uint32_t users = 20'000;
  uint32_t items = 1'000'000;
  uint32_t dim = 64;
  uint64_t interactions = 2'000'000;
  double zipf = 1.0;
  uint32_t epochs = 8;
  uint32_t tile = 1;
  double tile_noise = 0.05;  // relative to each row's RMS
  uint32_t train_threads = 2;
  uint64_t seed = 7;
};

// Adds --users, --items, --dim, --interactions, --zipf, --epochs, --tile, --tile-noise,
// --train-threads and --seed, writing into *w.
void AddCatalogueWorldOptions(CLI::App* app, CatalogueWorldOptions* w);

// Generates and fits the world, printing progress, and fills *parts with version 1: the
// fitted (and tiled) items, the members, their training items as seen lists, and degrees.
// No approximate index options are set.
Status FitCatalogueWorld(const CatalogueWorldOptions& o, SnapshotParts* parts);

// Seconds since `since` (steady clock).
double SecondsSince(std::chrono::steady_clock::time_point since);

// Nanoseconds as milliseconds with three decimals, for the tables.
std::string Milliseconds(int64_t ns);

// The largest relative change of a popularity group's share of the answers' slots against
// exact's, over the groups holding at least 2 % of exact's slots (smaller shares are a few
// slots in a run of these lengths). Both vectors have one entry per group.
double WorstGroupChange(const std::vector<double>& shares, const std::vector<double>& exact);

// Resident and peak resident memory of this process, MB (Linux /proc/self/status).
std::pair<double, double> ProcessRssMb();

}  // namespace plumb::server
