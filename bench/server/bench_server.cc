// plumb-serve's performance figures (issue 5), each beside a reference measured in the same
// run, since the machine is shared and absolute numbers move with its load.
//
//   scorer   100,000 items x 64 dims, 200,000 users with 20 seen items each: server-side
//            Recommend (top-20, exclude seen, through Scorer exactly as the service calls it)
//            against a plain memory scan of the item matrix (sum of every float) and the
//            scores-only product. CPU time, median of repeated runs (Google Benchmark).
//   monitor  the exposure monitor's cost: Recommend as above, then the served list recorded
//            into an ExposureWindow exactly as the service does, against the same calls
//            without it; interleaved rounds (off, on, off, on, ...) of thread CPU time, and
//            the median of the per-round ratios, so machine load hits both sides alike.
//   e2e      the same catalogue behind a real gRPC server on loopback, one client:
//            Recommend p50/p99 against an "empty" RPC, the same method rejected at
//            validation (no snapshot access, no scoring), interleaved call by call.
//   load     throughput with 1, 2, 4, 8 concurrent clients (each its own channel): QPS, p50,
//            p99. Clients and server share the machine's cores.
//   fold-in  which fold-in recovers a simulated user's own top-20 best (see fold_in.h).
//   swap     a 1,000,000 x 64 version (+200,000 users) loaded from a store and swapped in
//            while another such snapshot is held: seconds and peak RSS, in a fresh process.
//
//   build/<dir>/bench/server/bench_server [--sections=scorer,monitor,e2e,load,fold-in,swap]
//                                         [google benchmark flags]
#include <benchmark/benchmark.h>

#include <cstring>
#include <string>
#include <vector>

#include "bench/server/bench_world.h"

int main(int argc, char** argv) {
  std::string sections = "scorer,monitor,e2e,load,fold-in,swap";
  std::vector<char*> rest;
  for (int i = 0; i < argc; ++i) {
    if (std::strncmp(argv[i], "--sections=", 11) == 0) {
      sections = argv[i] + 11;
    } else {
      rest.push_back(argv[i]);
    }
  }
  int rest_argc = static_cast<int>(rest.size());
  benchmark::Initialize(&rest_argc, rest.data());
  auto wants = [&](const char* s) {
    return ("," + sections + ",").find("," + std::string(s) + ",") != std::string::npos;
  };
  // The swap runs first, in child processes, before this process holds any data.
  if (wants("swap")) plumb::server::bench::SwapSection();
  if (wants("scorer")) plumb::server::bench::ScorerSection(rest_argc, rest.data());
  if (wants("monitor")) plumb::server::bench::MonitorSection();
  if (wants("e2e")) plumb::server::bench::E2eSection();
  if (wants("load")) plumb::server::bench::LoadSection();
  if (wants("fold-in")) plumb::server::bench::FoldInSection();
  benchmark::Shutdown();
  return 0;
}
