// What bench_server's sections share (bench_server.cc lists the sections): the catalogue they
// measure (built once from a fast generator through the server suites' TestModel), the users
// they ask for, thread CPU time and the percentiles they report (nearest rank,
// core/percentile.h).
#pragma once

#include <cstdint>
#include <memory>
#include <string>
#include <vector>

#include "server/snapshot.h"

namespace plumb::server::bench {

constexpr uint32_t kItems = 100'000, kUsers = 200'000, kDim = 64, kSeen = 20, kTop = 20;

// A random version: items x kDim and users x kDim roughly normal values (scale 0.1), ids
// "tool-k" and "member-k", `seen` random items per user (duplicates drawn are dropped).
SnapshotParts RandomParts(uint64_t version, uint32_t items, uint32_t users, uint32_t seen,
                          uint64_t seed);

// The shared catalogue: RandomParts(1, kItems, kUsers, kSeen, 42), built on first use.
const std::shared_ptr<const Snapshot>& World();

// The k-th of a fixed spread of World()'s user ids, and the first n of them.
std::string SampledUserId(uint32_t k);
std::vector<std::string> SampledUserIds(uint32_t n);

double ThreadCpuSeconds();

// Nearest-rank percentiles (core/percentile.h) of latencies in microseconds.
struct Percentiles {
  double p50, p99;
};
Percentiles Summarise(std::vector<double> us);

// The sections (each in its own file); each prints its figures.
void ScorerSection(int argc, char** argv);  // scorer_bench.cc
void MonitorSection();                      // monitor_bench.cc
void E2eSection();                          // rpc_bench.cc
void LoadSection();                         // rpc_bench.cc
void FoldInSection();                       // fold_in_bench.cc
void SwapSection();                         // swap_bench.cc

}  // namespace plumb::server::bench
