#include "bench/server/bench_world.h"

#include <time.h>

#include <algorithm>
#include <cstdlib>
#include <span>

#include "core/percentile.h"
#include "tests/server/test_model.h"

namespace plumb::server::bench {
namespace {

// A fast generator for bulk data: the figures do not depend on the distribution's fine
// shape, and std::normal_distribution would dominate setup time for 80 M values.
struct FastRandom {
  uint64_t s;
  explicit FastRandom(uint64_t seed) : s(seed * 0x9E3779B97F4A7C15ull + 1) {}
  uint64_t Next() {
    s ^= s << 13;
    s ^= s >> 7;
    s ^= s << 17;
    return s;
  }
  // Roughly normal with unit variance: sum of four uniforms, centred and scaled.
  float Gauss() {
    float sum = 0;
    for (int k = 0; k < 4; ++k) sum += static_cast<float>(Next() >> 40) / 16777216.0f;
    return (sum - 2.0f) * 1.7320508f;
  }
};

}  // namespace

SnapshotParts RandomParts(uint64_t version, uint32_t items, uint32_t users, uint32_t seen,
                          uint64_t seed) {
  FastRandom rng(seed);
  testing::TestModel m;
  m.num_items = items;
  m.num_users = users;
  m.dim = kDim;
  m.items.resize(size_t{items} * kDim);
  m.users.resize(size_t{users} * kDim);
  for (float& v : m.items) v = 0.1f * rng.Gauss();
  for (float& v : m.users) v = 0.1f * rng.Gauss();
  for (uint32_t i = 0; i < items; ++i) m.item_ids.push_back("tool-" + std::to_string(i));
  for (uint32_t u = 0; u < users; ++u) m.user_ids.push_back("member-" + std::to_string(u));
  m.degrees.assign(items, 0);
  m.seen.resize(users);
  for (std::vector<uint32_t>& s : m.seen) {
    while (s.size() < seen) s.push_back(static_cast<uint32_t>(rng.Next() % items));
    std::sort(s.begin(), s.end());
    s.erase(std::unique(s.begin(), s.end()), s.end());
    for (uint32_t i : s) ++m.degrees[i];
  }
  SnapshotParts p = testing::ToParts(m, version);
  p.created_ms = 0;
  return p;
}

const std::shared_ptr<const Snapshot>& World() {
  static const std::shared_ptr<const Snapshot> snap = [] {
    std::shared_ptr<const Snapshot> s;
    if (!Snapshot::Build(RandomParts(1, kItems, kUsers, kSeen, 42), &s).ok()) std::abort();
    return s;
  }();
  return snap;
}

std::string SampledUserId(uint32_t k) { return "member-" + std::to_string((k * 7919u) % kUsers); }

std::vector<std::string> SampledUserIds(uint32_t n) {
  std::vector<std::string> ids;
  for (uint32_t k = 0; k < n; ++k) ids.push_back(SampledUserId(k));
  return ids;
}

double ThreadCpuSeconds() {
  timespec ts{};
  clock_gettime(CLOCK_THREAD_CPUTIME_ID, &ts);
  return static_cast<double>(ts.tv_sec) + static_cast<double>(ts.tv_nsec) * 1e-9;
}

Percentiles Summarise(std::vector<double> us) {
  std::sort(us.begin(), us.end());
  const std::span<const double> ascending(us);
  return {NearestRankPercentile(ascending, 50), NearestRankPercentile(ascending, 99)};
}

}  // namespace plumb::server::bench
