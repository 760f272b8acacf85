// ExposureWindow: the exposure monitor. Every served list is counted into a sliding window
// (the last N lists, optionally also no older than T seconds), and at scrape time the window
// is summarised against the served version's training degrees: ARP of served slots, the same
// average over training interactions and their ratio (popularity lift), Gini of item
// exposure, catalogue coverage, exposure share per popularity group beside interaction share
// per group, and the Jensen–Shannon divergence between the two (DESIGN.md §6).
//
// Cost on the request path: Record() is O(K) for a list of K items (plus O(catalogue) once
// per shard after a version change) and locks one of `shards` mutexes, picked per thread, so
// request threads do not share one lock. Every list gets a number from one counter shared by
// the shards, and a list belongs to the window while it is among the last window_lists
// numbered: the window holds the last window_lists lists served, however the request
// threads fall on the shards (exactly, when no list is being recorded during the summary).
// A shard drops what fell out of the window when it records, and Summarize() drops it from
// every shard, so an idle shard holds no stale lists past the next scrape.
//
// The window spans version changes: a swap keeps every list already in it. That works
// because an item index means the same item in every version (the store's item dictionary
// only grows; a newer version covers at least the indexes of an older one). Summarize()
// measures the whole window against the version it is asked about (its training degrees
// and popularity groups); slots of items beyond that version's catalogue (served by a
// newer version before a rollback to an older one) stay in the window's list count but are
// left out of the exposure figures, which cover only that version's items.
//
// Thread-safe: Record from any number of threads, Summarize concurrently with them.
#pragma once

#include <atomic>
#include <cstdint>
#include <memory>
#include <mutex>
#include <span>
#include <utility>
#include <vector>

#include "core/exposure_stats.h"
#include "server/exposure_sink.h"
#include "server/snapshot.h"

namespace plumb::server {

struct ExposureWindowOptions {
  uint32_t window_lists = 20000;  // the last this many served lists form the window. >= 1
  double window_seconds = 0.0;    // also drop lists older than this; 0 = by count only
  uint32_t groups = 5;            // popularity groups of equal interaction mass. >= 1
  uint32_t shards = 16;           // independent locks. >= 1
};

// What Summarize() reports.
struct ExposureFigures {
  uint64_t version = 0;
  uint64_t lists = 0;                   // lists in the window (all versions)
  uint64_t slots = 0;                   // served slots in the window of items the version knows
  double served_popularity = 0.0;       // mean training degree of a served slot (ARP)
  double interaction_popularity = 0.0;  // Σ d² / Σ d: mean degree over training interactions
  double lift = 0.0;                    // served / interaction popularity; NaN without data
  ExposureSummary summary;              // gini, coverage, group shares, drift
  // The most-served items of the window (item index, served slots), most first, ties by
  // smaller index; only when Summarize was asked for them.
  std::vector<std::pair<uint32_t, uint64_t>> top_items;
};

class ExposureWindow final : public ExposureSink {
 public:
  explicit ExposureWindow(const ExposureWindowOptions& options);
  ~ExposureWindow() override;
  ExposureWindow(const ExposureWindow&) = delete;
  ExposureWindow& operator=(const ExposureWindow&) = delete;

  void Record(const Snapshot& snap, std::span<const uint32_t> items) override;

  // Summarises the lists counted against `snap`'s version, and lists its `top_items`
  // most-served items (0: none). Cost O(shards × catalogue + catalogue log catalogue) — meant
  // for a scrape every few seconds, not the request path.
  ExposureFigures Summarize(const Snapshot& snap, size_t top_items = 0) const;

  const ExposureWindowOptions& options() const { return options_; }

 private:
  struct Shard;
  Shard& ShardForThisThread();

  ExposureWindowOptions options_;
  // Lists recorded so far (for the current versions of the shards); a list's number is the
  // value after its own increment, taken under its shard's lock.
  std::atomic<uint64_t> recorded_{0};
  std::vector<std::unique_ptr<Shard>> shards_;
  // Popularity groups of the version last summarised (recomputed when the version changes).
  mutable std::mutex groups_mu_;
  mutable uint64_t groups_version_ = 0;
  mutable std::vector<uint32_t> group_of_item_;
};

}  // namespace plumb::server

namespace plumb::server {

// Forwards every served list to two sinks (the lifetime counter and the window). Both are
// borrowed and must outlive the tee.
class ExposureTee final : public ExposureSink {
 public:
  ExposureTee(ExposureSink* first, ExposureSink* second) : first_(first), second_(second) {}
  void Record(const Snapshot& snap, std::span<const uint32_t> items) override {
    if (first_) first_->Record(snap, items);
    if (second_) second_->Record(snap, items);
  }

 private:
  ExposureSink* first_;
  ExposureSink* second_;
};

}  // namespace plumb::server
