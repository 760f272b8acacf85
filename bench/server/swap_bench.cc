// bench_server's swap section: a 1,000,000 x 64 version loaded from a store and swapped in
// while another is held, seconds and peak RSS, each step in a fresh child process (see
// bench_world.h).
#include <sys/resource.h>
#include <sys/wait.h>
#include <unistd.h>

#include <chrono>
#include <cstdio>
#include <cstdlib>
#include <cstring>
#include <fstream>
#include <memory>
#include <string>
#include <vector>

#include "bench/server/bench_world.h"
#include "server/snapshot.h"
#include "server/snapshot_holder.h"
#include "store/store.h"

namespace plumb::server::bench {

namespace {

double ProcessCpuSeconds() {
  rusage r;
  getrusage(RUSAGE_SELF, &r);  // both loading threads
  return r.ru_utime.tv_sec + r.ru_utime.tv_usec / 1e6 + r.ru_stime.tv_sec +
         r.ru_stime.tv_usec / 1e6;
}

std::string LoadAverage() {
  std::ifstream in("/proc/loadavg");
  std::string one;
  in >> one;
  return one;
}

long StatusKb(const char* field) {
  std::ifstream in("/proc/self/status");
  std::string line;
  while (std::getline(in, line)) {
    if (line.rfind(field, 0) == 0) return std::stol(line.substr(std::strlen(field)));
  }
  return -1;
}

template <typename F>
int InChild(F f) {
  const pid_t pid = fork();
  if (pid == 0) {
    const int code = f();
    std::fflush(stdout);  // _exit skips stdio buffers
    _exit(code);
  }
  int status = 0;
  waitpid(pid, &status, 0);
  return WIFEXITED(status) ? WEXITSTATUS(status) : 99;
}

}  // namespace

void SwapSection() {
  constexpr uint32_t kBigItems = 1'000'000, kBigUsers = 200'000, kBigSeen = 10;
  char dir_template[] = "/tmp/plumb-bench-swap-XXXXXX";
  const std::string dir = mkdtemp(dir_template);
  std::printf("\n[swap] %u items x %u dims, %u users, %u interactions each; store in %s\n",
              kBigItems, kDim, kBigUsers, kBigSeen, dir.c_str());
  std::fflush(stdout);
  // Writing the store happens in its own process so that none of its memory is counted.
  int rc = InChild([&] {
    store::StoreOptions options;
    options.sync = false;
    std::unique_ptr<store::Store> primary;
    if (!store::Store::OpenPrimary(dir + "/db", options, &primary).ok()) return 1;
    for (uint64_t seed : {1, 2}) {
      SnapshotParts p = RandomParts(seed, kBigItems, kBigUsers, kBigSeen, seed);
      store::StateChange change;
      std::vector<uint32_t> degrees(p.item_degrees.begin(), p.item_degrees.end());
      if (seed == 1) {
        for (uint32_t u = 0; u < kBigUsers; ++u) change.new_users.emplace_back(u, p.user_ids[u]);
        for (uint32_t i = 0; i < kBigItems; ++i) change.new_items.emplace_back(i, p.item_ids[i]);
        for (uint32_t u = 0; u < kBigUsers; ++u)
          for (uint64_t j = p.seen_offsets[u]; j < p.seen_offsets[u + 1]; ++j)
            change.new_interactions.emplace_back(u, p.seen_items[j]);
      }
      store::VersionWrite write;
      write.manifest.objective = "cpr";
      write.manifest.num_users = kBigUsers;
      write.manifest.num_items = kBigItems;
      write.manifest.dim = kDim;
      write.manifest.num_interactions = p.seen_items.size();
      write.users = {p.users.data(), kBigUsers, kDim};
      write.items = {p.items.data(), kBigItems, kDim};
      write.item_degrees = degrees;
      change.version = &write;
      change.activate_published = seed == 1;
      Status s = primary->Commit(change);
      if (!s.ok()) {
        std::fprintf(stderr, "commit: %s\n", s.ToString().c_str());
        return 1;
      }
    }
    return 0;
  });
  if (rc != 0) {
    std::printf("  store setup failed\n");
    return;
  }
  rc = InChild([&] {
    const long rss_exec = StatusKb("VmRSS:");
    std::unique_ptr<store::Store> secondary;
    if (!store::Store::OpenSecondary(dir + "/db", dir + "/scratch", &secondary).ok()) return 1;
    SnapshotHolder holder;
    const long rss_start = StatusKb("VmRSS:");
    std::shared_ptr<const Snapshot> first;
    auto t0 = std::chrono::steady_clock::now();
    if (!LoadSnapshot(*secondary, 1, &first).ok()) return 2;
    holder.Swap(first);
    const double first_s =
        std::chrono::duration<double>(std::chrono::steady_clock::now() - t0).count();
    const size_t first_bytes = first->memory_bytes();
    first.reset();
    // A request still holds version 1 during the whole swap, as in-flight requests would.
    std::shared_ptr<const Snapshot> in_flight = holder.Get();
    const long rss_before = StatusKb("VmRSS:");
    std::ofstream("/proc/self/clear_refs") << "5";  // reset the peak (VmHWM) to the current RSS
    t0 = std::chrono::steady_clock::now();
    const double cpu0 = ProcessCpuSeconds();
    std::shared_ptr<const Snapshot> next;
    Status s = LoadSnapshot(*secondary, 2, &next);
    if (!s.ok()) return 3;
    const size_t next_bytes = next->memory_bytes();
    holder.Swap(std::move(next));
    const double swap_s =
        std::chrono::duration<double>(std::chrono::steady_clock::now() - t0).count();
    const double swap_cpu = ProcessCpuSeconds() - cpu0;
    const long peak = StatusKb("VmHWM:");
    in_flight.reset();
    const double mb = 1024.0;
    std::printf("  first load (nothing held)      %.2f s\n", first_s);
    std::printf(
        "  load + swap of the second      %.2f s wall, %.2f s CPU (target < 3 s; load average "
        "%s)\n",
        swap_s, swap_cpu, LoadAverage().c_str());
    std::printf("  snapshot sizes                 %.0f MB + %.0f MB\n", first_bytes / 1e6,
                next_bytes / 1e6);
    std::printf(
        "  RSS: process %.0f MB, + RocksDB secondary opened %.0f MB, holding one snapshot %.0f "
        "MB,\n"
        "       peak during the swap %.0f MB (%.0f MB above the open secondary)\n",
        rss_exec / mb, rss_start / mb, rss_before / mb, peak / mb, (peak - rss_start) / mb);
    std::printf(
        "  peak vs 2 x (both snapshots) + 150 MB = %.0f MB: %s\n",
        2 * (first_bytes + next_bytes) / 1e6 + 150,
        peak / mb * 1.048576 < 2 * (first_bytes + next_bytes) / 1e6 + 150 ? "under" : "OVER");
    std::printf("  peak vs both snapshots + 150 MB = %.0f MB: %s\n",
                (first_bytes + next_bytes) / 1e6 + 150,
                peak / mb * 1.048576 < (first_bytes + next_bytes) / 1e6 + 150 ? "under" : "over");
    return 0;
  });
  if (rc != 0) std::printf("  measurement failed (%d)\n", rc);
  std::string cleanup = "rm -rf " + dir;
  if (std::system(cleanup.c_str()) != 0) std::printf("  could not remove %s\n", dir.c_str());
}

}  // namespace plumb::server::bench
