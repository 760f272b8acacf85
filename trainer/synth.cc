#include "trainer/synth.h"

#include <algorithm>
#include <cmath>
#include <filesystem>
#include <fstream>
#include <numeric>
#include <string>
#include <string_view>
#include <system_error>

#include "trainer/rng.h"

namespace plumb::trainer {

namespace {

// Stream ids for mix_seed, one per purpose, so that changing one part of the world (say the
// test size) leaves the others unchanged.
enum Stream : uint64_t {
  kTasteStream = 1,
  kTraitStream,
  kAppealStream,
  kVisibilityStream,
  kActivityStream,
  kCalibrationStream,
  kBorrowStream,
  kTestStream,
  kNameStream,
  kLateTasteStream,
  kLateVisibilityStream,
  kLateBorrowStream,
  kArrivalStream,
};

constexpr const char* kAdjectives[] = {"cordless",      "heavy-duty",  "folding", "compact",
                                       "telescopic",    "electric",    "manual",  "adjustable",
                                       "extra-long",    "lightweight", "petrol",  "rechargeable",
                                       "two-speed",     "industrial",  "mini",    "wide",
                                       "quick-release", "ergonomic",   "steel",   "weatherproof"};
constexpr const char* kTools[] = {
    "hedge trimmer",  "drill",        "ladder",         "circular saw",
    "jigsaw",         "lawn mower",   "leaf blower",    "pressure washer",
    "wheelbarrow",    "sander",       "tile cutter",    "wallpaper steamer",
    "socket set",     "stud finder",  "chainsaw",       "post hole digger",
    "paint sprayer",  "router",       "angle grinder",  "workbench",
    "spirit level",   "pipe wrench",  "soldering iron", "glue gun",
    "carpet cleaner", "log splitter", "rotavator",      "scaffold tower",
    "nail gun",       "jack stand"};

double Logistic(double x) { return 1.0 / (1.0 + std::exp(-x)); }

}  // namespace

Status ParseSynthDrift(std::string_view name, SynthDrift* out) {
  if (name == "none") {
    *out = SynthDrift::kNone;
  } else if (name == "popularity") {
    *out = SynthDrift::kPopularity;
  } else if (name == "tastes") {
    *out = SynthDrift::kTastes;
  } else {
    return Status::InvalidArgument("unknown drift '" + std::string(name) +
                                   "' (expected none, popularity or tastes)");
  }
  return Status::Ok();
}

std::string_view SynthDriftName(SynthDrift drift) {
  switch (drift) {
    case SynthDrift::kPopularity:
      return "popularity";
    case SynthDrift::kTastes:
      return "tastes";
    case SynthDrift::kNone:
      break;
  }
  return "none";
}

Status ValidateSynthOptions(const SynthOptions& o) {
  auto bad = [](const std::string& m) { return Status::InvalidArgument("synth: " + m); };
  if (o.users < 2 || o.users > 10'000'000) return bad("users must be in 2..10000000");
  if (o.items < 2 || o.items > 10'000'000) return bad("items must be in 2..10000000");
  if (o.truth_dim < 1 || o.truth_dim > 256) return bad("truth_dim must be in 1..256");
  if (!(o.alpha >= 0.0 && o.alpha <= 10.0)) return bad("alpha must be in [0, 10]");
  if (!(o.zipf >= 0.0 && o.zipf <= 5.0)) return bad("zipf must be in [0, 5]");
  if (!(o.activity_sigma >= 0.0 && o.activity_sigma <= 5.0)) {
    return bad("activity_sigma must be in [0, 5]");
  }
  if (o.target_interactions < 1) return bad("target_interactions must be >= 1");
  if (static_cast<double>(o.target_interactions) >
      0.5 * static_cast<double>(o.users) * static_cast<double>(o.items)) {
    return bad("target_interactions must be at most half of users x items");
  }
  if (!(std::isfinite(o.relevance_scale) && std::isfinite(o.relevance_offset) &&
        o.appeal_sigma >= 0.0 && std::isfinite(o.appeal_sigma))) {
    return bad("relevance parameters must be finite (appeal_sigma >= 0)");
  }
  if (o.test_items_per_user > o.items) return bad("test_items_per_user must be <= items");
  if (o.days < 1) return bad("days must be >= 1");
  if (!(o.drift_at > 0.0 && o.drift_at < 1.0)) return bad("drift_at must be in (0, 1)");
  if (!(o.drift_strength >= 0.0 && o.drift_strength <= 1.0)) {
    return bad("drift_strength must be in [0, 1]");
  }
  if (!(o.arrival_span >= 0.0 && o.arrival_span < 1.0)) {
    return bad("arrival_span must be in [0, 1)");
  }
  if (!(o.appeal_visibility >= -1.0 && o.appeal_visibility <= 1.0)) {
    return bad("appeal_visibility must be in [-1, 1]");
  }
  return Status::Ok();
}

namespace {

double RelevanceWith(const SynthWorld& w, const RowMatrix& taste, uint32_t user, uint32_t item) {
  const double dot = static_cast<double>(taste.row(user).dot(w.item_traits.row(item))) /
                     std::sqrt(static_cast<double>(w.options.truth_dim));
  return Logistic(w.options.relevance_scale * dot + w.item_appeal[item] +
                  w.options.relevance_offset);
}

// One stretch of the time window during which the world does not change.
struct Phase {
  int64_t begin_ms = 0;  // offsets from start_ms
  int64_t end_ms = 0;
  double share = 1.0;             // (end - begin) / window: scales the exposure
  std::vector<uint32_t> by_rank;  // tool at each shelf rank
  const RowMatrix* taste = nullptr;
};

// Share of `phase` during which both a member joined at ju and a tool joined at ji exist,
// and the start of that overlap (offsets from start_ms).
double Overlap(const Phase& phase, int64_t ju, int64_t ji, int64_t* from) {
  *from = std::max({phase.begin_ms, ju, ji});
  if (*from >= phase.end_ms) return 0.0;
  return static_cast<double>(phase.end_ms - *from) /
         static_cast<double>(phase.end_ms - phase.begin_ms);
}

// The tools in shelf order (rank 0 is the most visible). Without a correlation a uniform
// random permutation (Fisher-Yates); with one, tools sorted by rho z_i + sqrt(1 - rho^2) e_i,
// descending, with z_i the standardised appeal and e_i standard normal noise.
std::vector<uint32_t> ShelfOrder(uint64_t seed, uint64_t stream, uint32_t items, double rho,
                                 const std::vector<double>& appeal, double appeal_sigma) {
  std::vector<uint32_t> by_rank(items);
  std::iota(by_rank.begin(), by_rank.end(), 0u);
  Rng rng(mix_seed(seed, stream));
  if (rho == 0.0 || appeal_sigma <= 0.0) {
    for (uint32_t n = items - 1; n > 0; --n) std::swap(by_rank[n], by_rank[rng.Uniform(n + 1)]);
    return by_rank;
  }
  std::vector<double> key(items);
  const double noise = std::sqrt(1.0 - rho * rho);
  for (uint32_t i = 0; i < items; ++i) {
    key[i] = rho * appeal[i] / appeal_sigma + noise * rng.Normal();
  }
  std::sort(by_rank.begin(), by_rank.end(), [&](uint32_t a, uint32_t b) {
    return key[a] != key[b] ? key[a] > key[b] : a < b;
  });
  return by_rank;
}

}  // namespace

double SynthWorld::Relevance(uint32_t user, uint32_t item) const {
  return RelevanceWith(*this, user_taste_late.rows() > 0 ? user_taste_late : user_taste, user,
                       item);
}

double SynthWorld::EarlyRelevance(uint32_t user, uint32_t item) const {
  return RelevanceWith(*this, user_taste, user, item);
}

void SynthWorld::TrueScores(uint32_t user, std::span<float> scores) const {
  const RowMatrix& taste = user_taste_late.rows() > 0 ? user_taste_late : user_taste;
  const double norm = 1.0 / std::sqrt(static_cast<double>(options.truth_dim));
  for (uint32_t i = 0; i < options.items && i < scores.size(); ++i) {
    const double dot = static_cast<double>(taste.row(user).dot(item_traits.row(i))) * norm;
    scores[i] = static_cast<float>(options.relevance_scale * dot + item_appeal[i]);
  }
}

Status SynthWorld::TrainInteractions(Interactions* out) const {
  std::vector<Pair> pairs;
  pairs.reserve(events.size());
  for (const SynthEvent& e : events) pairs.push_back(Pair{e.user, e.item});
  return Interactions::Build(pairs, options.users, options.items, out);
}

// Built by append: GCC 12 warns falsely (-Wrestrict) on "x" + std::to_string(n).
std::string MemberLabel(uint32_t user) {
  std::string s = "m";
  s.append(std::to_string(user));
  return s;
}
std::string ToolLabel(uint32_t item) {
  std::string s = "t";
  s.append(std::to_string(item));
  return s;
}

Status GenerateSynthWorld(const SynthOptions& o, SynthWorld* out) {
  PLUMB_RETURN_IF_ERROR(ValidateSynthOptions(o));
  SynthWorld w;
  w.options = o;
  const uint32_t U = o.users, I = o.items, D = o.truth_dim;

  // Latent truth.
  w.user_taste.resize(U, D);
  w.item_traits.resize(I, D);
  for (uint32_t u = 0; u < U; ++u) {
    Rng rng(mix_seed(o.seed, kTasteStream, u));
    for (uint32_t d = 0; d < D; ++d) w.user_taste(u, d) = static_cast<float>(rng.Normal());
  }
  if (o.drift == SynthDrift::kTastes) {
    w.user_taste_late.resize(U, D);
    const double keep = std::sqrt(1.0 - o.drift_strength * o.drift_strength);
    for (uint32_t u = 0; u < U; ++u) {
      Rng rng(mix_seed(o.seed, kLateTasteStream, u));
      for (uint32_t d = 0; d < D; ++d) {
        w.user_taste_late(u, d) =
            static_cast<float>(keep * w.user_taste(u, d) + o.drift_strength * rng.Normal());
      }
    }
  }
  w.item_appeal.resize(I);
  for (uint32_t i = 0; i < I; ++i) {
    Rng rng(mix_seed(o.seed, kTraitStream, i));
    for (uint32_t d = 0; d < D; ++d) w.item_traits(i, d) = static_cast<float>(rng.Normal());
    Rng arng(mix_seed(o.seed, kAppealStream, i));
    w.item_appeal[i] = o.appeal_sigma * arng.Normal();
  }

  // The phases of the window: one, or two around drift_at.
  const int64_t window_ms = static_cast<int64_t>(o.days) * 86'400'000;
  std::vector<Phase> phases(1);
  phases[0].end_ms = window_ms;
  phases[0].by_rank =
      ShelfOrder(o.seed, kVisibilityStream, I, o.appeal_visibility, w.item_appeal, o.appeal_sigma);
  phases[0].taste = &w.user_taste;
  if (o.drift != SynthDrift::kNone) {
    const int64_t cut = static_cast<int64_t>(o.drift_at * static_cast<double>(window_ms));
    phases.push_back(phases[0]);
    phases[0].end_ms = phases[1].begin_ms = cut;
    phases[0].share = static_cast<double>(cut) / static_cast<double>(window_ms);
    phases[1].share = 1.0 - phases[0].share;
    if (o.drift == SynthDrift::kPopularity) {
      phases[1].by_rank = ShelfOrder(o.seed, kLateVisibilityStream, I, o.appeal_visibility,
                                     w.item_appeal, o.appeal_sigma);
    } else {
      phases[1].taste = &w.user_taste_late;
    }
  }

  // Visibility: a random shelf order (Fisher-Yates) and a Zipf-like curve over it. The
  // reported visibility is the first phase's.
  std::vector<double> vis_at_rank(I);
  w.item_visibility.resize(I);
  for (uint32_t r = 0; r < I; ++r) {
    vis_at_rank[r] = std::pow(static_cast<double>(r) + 1.0, -o.zipf);
    w.item_visibility[phases[0].by_rank[r]] = vis_at_rank[r];
  }
  w.item_visibility_late.resize(I);
  for (uint32_t r = 0; r < I; ++r) {
    w.item_visibility_late[phases.back().by_rank[r]] = vis_at_rank[r];
  }
  w.user_activity.resize(U);
  for (uint32_t u = 0; u < U; ++u) {
    Rng rng(mix_seed(o.seed, kActivityStream, u));
    w.user_activity[u] = std::exp(o.activity_sigma * rng.Normal());
  }
  w.user_join_ms.assign(U, 0);
  w.item_join_ms.assign(I, 0);
  if (o.arrival_span > 0.0) {
    const double span = o.arrival_span * static_cast<double>(window_ms);
    for (uint32_t u = 0; u < U; ++u) {
      Rng rng(mix_seed(o.seed, kArrivalStream, u));
      w.user_join_ms[u] = static_cast<int64_t>(rng.UniformDouble() * span);
    }
    for (uint32_t i = 0; i < I; ++i) {
      Rng rng(mix_seed(o.seed, kArrivalStream, uint64_t{U} + i));
      w.item_join_ms[i] = static_cast<int64_t>(rng.UniformDouble() * span);
    }
  }

  // Calibrate c by Monte Carlo over random pairs: E[count](c) = U I mean over pairs of
  // sum over phases of r_p min(1, c share_p overlap_p e_u e_i r_p^a) (ignoring that a pair
  // seen in the first phase is not seen again: a small over-estimate with two phases).
  {
    constexpr uint32_t kProbes = 1u << 19;
    Rng rng(mix_seed(o.seed, kCalibrationStream));
    const size_t P = phases.size();
    std::vector<double> rel(kProbes * P), rel_a(kProbes * P), ee(kProbes * P);
    for (uint32_t m = 0; m < kProbes; ++m) {
      const uint32_t u = static_cast<uint32_t>(rng.Uniform(U));
      const uint32_t i = static_cast<uint32_t>(rng.Uniform(I));
      for (size_t p = 0; p < P; ++p) {
        const size_t at = m * P + p;
        int64_t from = 0;
        const double vis = p == 0 ? w.item_visibility[i] : w.item_visibility_late[i];
        rel[at] = RelevanceWith(w, *phases[p].taste, u, i);
        rel_a[at] = std::pow(rel[at], o.alpha);
        ee[at] = phases[p].share * w.user_activity[u] * vis *
                 Overlap(phases[p], w.user_join_ms[u], w.item_join_ms[i], &from);
      }
    }
    const double pairs = static_cast<double>(U) * static_cast<double>(I);
    auto expected = [&](double c) {
      double s = 0.0;
      for (size_t m = 0; m < rel.size(); ++m) s += rel[m] * std::min(1.0, c * ee[m] * rel_a[m]);
      return s / kProbes * pairs;
    };
    const double target = static_cast<double>(o.target_interactions);
    double lo = -30.0, hi = 30.0;  // log c
    if (expected(std::exp(hi)) < target) {
      return Status::InvalidArgument(
          "synth: target_interactions is unreachable: even with full exposure only about " +
          std::to_string(static_cast<uint64_t>(expected(std::exp(hi)))) +
          " interactions are relevant; raise relevance_offset or lower the target");
    }
    for (int it = 0; it < 100; ++it) {
      const double mid = 0.5 * (lo + hi);
      (expected(std::exp(mid)) < target ? lo : hi) = mid;
    }
    w.exposure_scale = std::exp(0.5 * (lo + hi));
  }

  // Borrowings, member by member and phase by phase, by thinning (see the header).
  const double c = w.exposure_scale;
  std::vector<std::vector<uint32_t>> seen(U);
  for (uint32_t u = 0; u < U; ++u) {
    for (size_t ph = 0; ph < phases.size(); ++ph) {
      const Phase& phase = phases[ph];
      Rng rng(mix_seed(o.seed, ph == 0 ? kBorrowStream : kLateBorrowStream, u));
      const double a_u = c * phase.share * w.user_activity[u];
      const size_t seen_before = seen[u].size();
      auto consider = [&](uint32_t rank, double bound) {
        const uint32_t item = phase.by_rank[rank];
        int64_t from = 0;
        const double overlap = Overlap(phase, w.user_join_ms[u], w.item_join_ms[item], &from);
        if (overlap <= 0.0) return;
        if (ph > 0 && std::binary_search(seen[u].begin(), seen[u].begin() + seen_before, item)) {
          return;  // already borrowed in the first phase
        }
        const double r = RelevanceWith(w, *phase.taste, u, item);
        const double p =
            r * std::min(1.0, a_u * overlap * vis_at_rank[rank] * std::pow(r, o.alpha));
        if (rng.UniformDouble() * bound < p) {
          seen[u].push_back(item);
          w.events.push_back(SynthEvent{
              u, item, o.start_ms + from + static_cast<int64_t>(rng.Uniform(phase.end_ms - from))});
        }
      };
      // Blocks of ranks [s, 2s + 1): within a block the candidate probability
      // min(1, a_u vis) is at most its value at the block's first rank.
      for (uint32_t s = 0; s < I;) {
        const uint32_t end = static_cast<uint32_t>(std::min<uint64_t>(I, 2ull * s + 1));
        const double p_max = std::min(1.0, a_u * vis_at_rank[s]);
        if (p_max >= 0.25) {
          for (uint32_t rank = s; rank < end; ++rank) {
            const double p = std::min(1.0, a_u * vis_at_rank[rank]);
            if (rng.UniformDouble() < p) consider(rank, p);
          }
        } else if (p_max > 0.0) {
          const double log_q = std::log1p(-p_max);
          uint64_t rank = s;
          while (true) {
            // Failures before the next success of a Bernoulli(p_max) sequence.
            const double uni = 1.0 - rng.UniformDouble();  // (0, 1]
            const double skip = std::floor(std::log(uni) / log_q);
            if (skip >= static_cast<double>(end - rank)) break;
            rank += static_cast<uint64_t>(skip);
            const double p = std::min(1.0, a_u * vis_at_rank[rank]);
            if (rng.UniformDouble() * p_max < p) consider(static_cast<uint32_t>(rank), p);
            ++rank;
          }
        }
        s = end;
      }
      std::sort(seen[u].begin(), seen[u].end());
    }
  }
  std::sort(w.events.begin(), w.events.end(), [](const SynthEvent& a, const SynthEvent& b) {
    if (a.ts_ms != b.ts_ms) return a.ts_ms < b.ts_ms;
    return a.user != b.user ? a.user < b.user : a.item < b.item;
  });

  // Debiased test set: uniform proposals over the catalogue, accepted by a fresh relevance
  // draw (late tastes after a taste drift), never an observed tool.
  for (uint32_t u = 0; u < U && o.test_items_per_user > 0; ++u) {
    if (seen[u].empty()) continue;
    Rng rng(mix_seed(o.seed, kTestStream, u));
    std::vector<uint32_t> chosen;
    const uint64_t max_probes = std::max<uint64_t>(4ull * I, 200ull * o.test_items_per_user);
    for (uint64_t probe = 0; probe < max_probes && chosen.size() < o.test_items_per_user; ++probe) {
      const uint32_t i = static_cast<uint32_t>(rng.Uniform(I));
      if (std::binary_search(seen[u].begin(), seen[u].end(), i)) continue;
      if (std::find(chosen.begin(), chosen.end(), i) != chosen.end()) continue;
      if (rng.Bernoulli(w.Relevance(u, i))) chosen.push_back(i);
    }
    std::sort(chosen.begin(), chosen.end());
    for (uint32_t i : chosen) w.test.push_back(Pair{u, i});
  }

  // Names: adjective + tool + a serial number per (adjective, tool) combination.
  {
    Rng rng(mix_seed(o.seed, kNameStream));
    constexpr size_t kA = std::size(kAdjectives), kT = std::size(kTools);
    std::vector<uint32_t> serial(kA * kT, 0);
    w.item_names.reserve(I);
    for (uint32_t i = 0; i < I; ++i) {
      const size_t a = rng.Uniform(kA), t = rng.Uniform(kT);
      w.item_names.push_back(std::string(kAdjectives[a]) + " " + kTools[t] + " #" +
                             std::to_string(++serial[a * kT + t]));
    }
  }
  *out = std::move(w);
  return Status::Ok();
}

Status WriteSynthCsv(const SynthWorld& world, const std::string& dir) {
  std::error_code ec;
  std::filesystem::create_directories(dir, ec);
  if (ec) return Status::IoError("cannot create directory " + dir + ": " + ec.message());
  auto write = [&](const std::string& name, auto&& body) -> Status {
    const std::string path = (std::filesystem::path(dir) / name).string();
    std::ofstream f(path, std::ios::out | std::ios::trunc);
    if (!f) return Status::IoError("cannot open " + path + " for writing");
    body(f);
    f.flush();
    if (!f) return Status::IoError("error writing " + path);
    return Status::Ok();
  };
  PLUMB_RETURN_IF_ERROR(write("events.csv", [&](std::ofstream& f) {
    f << "user,item,ts\n";
    for (const SynthEvent& e : world.events) {
      f << 'm' << e.user << ",t" << e.item << ',' << e.ts_ms << '\n';
    }
  }));
  PLUMB_RETURN_IF_ERROR(write("test.csv", [&](std::ofstream& f) {
    f << "user,item\n";
    for (const Pair& p : world.test) f << 'm' << p.user << ",t" << p.item << '\n';
  }));
  return write("items.csv", [&](std::ofstream& f) {
    f << "item,name\n";
    for (size_t i = 0; i < world.item_names.size(); ++i) {
      f << 't' << i << ',' << world.item_names[i] << '\n';
    }
  });
}

}  // namespace plumb::trainer
