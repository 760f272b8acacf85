// The synthetic demo world: members of a neighbourhood tool-lending library borrowing tools.
// It is built so that the observed borrowing history is biased by exposure the way
// DESIGN.md section 2 describes, while the true preferences are known, so a debiased test
// set can be drawn from them directly.
//
// Ground truth:
//   - every member u has a latent taste vector x_u and every tool i a latent vector y_i
//     (standard normal, truth_dim coordinates), and every tool a genuine appeal a_i;
//   - relevance probability r(u,i) = sigma(relevance_scale * <x_u, y_i> / sqrt(truth_dim)
//     + a_i + relevance_offset); a negative offset makes relevance sparse.
// Exposure (the factorised model of DESIGN.md): P(o=1 | r=1) = min(1, c e_u e_i r(u,i)^alpha)
//   - e_i: tool visibility, Zipf-like, (rank_i + 1)^(-zipf) for a random ranking of tools
//     (the shelf by the door, the newsletter's tool of the week);
//   - e_u: member activity, log-normal;
//   - c: one scale, calibrated so that about target_interactions borrowings are observed.
// Observed: y = (relevance draw) AND (exposure draw), i.e. P(y=1) = r min(1, c e_u e_i r^alpha).
//
// Change over time (optional, for streams that are not stationary):
//   - drift: at drift_at of the time window the world changes once. kPopularity: the shelf
//     order is drawn again (other tools become the visible ones); kTastes: every member's
//     taste moves to x'_u = sqrt(1 - s^2) x_u + s z_u with fresh normal z_u and s =
//     drift_strength, and the ground-truth test follows the late tastes. Each phase's
//     exposure scale is c times the phase's share of the window (borrowing happens at the
//     same rate in time), and a pair observed in the first phase is not observed again.
//   - arrivals: members and tools join at a time drawn uniformly from the first
//     arrival_span of the window; a pair can only be borrowed while both exist, so its
//     exposure in a phase is multiplied by the share of the phase in which both exist, and its
//     timestamp falls in that overlap. Late rows are what an online trainer meets in
//     production: users and items it has never seen.
//
// Generation never visits all member x tool pairs: for each member, candidate tools are
// drawn by geometric skipping over the visibility order with the bound min(1, c e_u e_i)
// and then accepted with the exact remaining probability (thinning), so the result is
// exactly distributed as above at a cost proportional to the candidates. Deterministic per
// seed (each member has its own random stream).
#pragma once

#include <cstdint>
#include <span>
#include <string>
#include <string_view>
#include <vector>

#include "core/status.h"
#include "trainer/embeddings.h"
#include "trainer/interactions.h"

namespace plumb::trainer {

enum class SynthDrift : uint8_t { kNone, kPopularity, kTastes };

// "none" | "popularity" | "tastes". Errors: InvalidArgument naming the accepted values.
Status ParseSynthDrift(std::string_view name, SynthDrift* out);
std::string_view SynthDriftName(SynthDrift drift);

struct SynthOptions {
  uint32_t users = 2000;
  uint32_t items = 1000;
  uint32_t truth_dim = 16;
  uint64_t seed = 1;
  // Exponent of relevance in the exposure probability (0: exposure ignores relevance).
  double alpha = 0.5;
  // Visibility e_i = (rank + 1)^(-zipf): larger is more skewed.
  double zipf = 1.0;
  // Spread (sigma of the log) of member activity e_u.
  double activity_sigma = 0.5;
  // About this many observed interactions (the exposure scale c is calibrated to it).
  uint64_t target_interactions = 60000;
  // Relevance logit: relevance_scale * <x,y>/sqrt(dim) + appeal + relevance_offset.
  double relevance_scale = 2.5;
  double relevance_offset = -3.0;
  // Standard deviation of the genuine item-wide appeal a_i.
  double appeal_sigma = 0.5;
  // Debiased test set: for each member with at least one observed interaction, up to this
  // many tools drawn uniformly over the catalogue and kept with probability r(u,i)
  // (a fresh relevance draw, no exposure), excluding the member's observed tools.
  uint32_t test_items_per_user = 10;
  // Timestamps (milliseconds since the epoch) spread uniformly over this window.
  int64_t start_ms = 1735689600000;  // 2025-01-01T00:00:00Z
  uint32_t days = 90;
  // Change over time (see the file comment). drift_at in (0, 1), drift_strength in [0, 1],
  // arrival_span in [0, 1) (0: everyone exists from the start).
  SynthDrift drift = SynthDrift::kNone;
  double drift_at = 0.5;
  double drift_strength = 1.0;
  double arrival_span = 0.0;
  // Correlation in [-1, 1] between a tool's genuine appeal and its place on the shelf: 0 (the
  // default) puts the shelf in random order, so visibility says nothing about appeal and the
  // truly relevant tools sit in the long tail of borrowings; positive values put the more
  // appealing tools where they are seen most, as in shops whose popular items are popular for a
  // reason (then less debiasing is right).
  double appeal_visibility = 0.0;
};

// Checks ranges. Errors: InvalidArgument naming the option.
Status ValidateSynthOptions(const SynthOptions& options);

struct SynthEvent {
  uint32_t user = 0;
  uint32_t item = 0;
  int64_t ts_ms = 0;
};

// Everything the generator knows. Copyable value type; const methods are thread-safe.
struct SynthWorld {
  SynthOptions options;
  // Observed borrowings, ascending by (ts, user, item); each (user, item) at most once.
  std::vector<SynthEvent> events;
  // Debiased ground-truth test pairs, ascending by (user, item); none is an observed pair.
  std::vector<Pair> test;
  // item_names[i]: e.g. "cordless hedge trimmer #12". Unique.
  std::vector<std::string> item_names;

  // Ground truth, for analysis and oracle rankings.
  RowMatrix user_taste;               // users x truth_dim (before a taste drift)
  RowMatrix user_taste_late;          // after a taste drift; empty without one
  std::vector<int64_t> user_join_ms;  // arrival times (all start_ms without arrivals)
  std::vector<int64_t> item_join_ms;
  RowMatrix item_traits;                     // items x truth_dim
  std::vector<double> item_appeal;           // a_i
  std::vector<double> item_visibility;       // e_i, max 1 (before a popularity drift)
  std::vector<double> item_visibility_late;  // after a popularity drift (else the same)
  std::vector<double> user_activity;         // e_u
  double exposure_scale = 0.0;               // c

  // r(u, i) as defined above, with the tastes of the end of the window (the late tastes
  // after a taste drift; the test set follows these).
  double Relevance(uint32_t user, uint32_t item) const;
  // r(u, i) with the tastes before a taste drift (the same as Relevance without one).
  double EarlyRelevance(uint32_t user, uint32_t item) const;
  // The relevance logit of every item for `user` into scores (size items), with the late
  // tastes: a ranking by true relevance, the reference beside which evaluation reports
  // group shares.
  void TrueScores(uint32_t user, std::span<float> scores) const;
  // The observed events as training interactions (users x items shape).
  Status TrainInteractions(Interactions* out) const;
};

// External ids used in the CSV files: "m<index>" for members, "t<index>" for tools.
std::string MemberLabel(uint32_t user);
std::string ToolLabel(uint32_t item);

// Builds the world. Errors: InvalidArgument for bad options; *out unchanged then.
Status GenerateSynthWorld(const SynthOptions& options, SynthWorld* out);

// Writes dir/events.csv (header `user,item,ts`, ts in milliseconds), dir/test.csv
// (`user,item`) and dir/items.csv (`item,name`), creating dir if needed. Names contain no
// comma or quote. Errors: IoError naming the file when it cannot be written (files written
// before stay).
Status WriteSynthCsv(const SynthWorld& world, const std::string& dir);

}  // namespace plumb::trainer
