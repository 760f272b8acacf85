// CatchUpLoop: keeps the serving snapshot in step with the store's active version.
//
// Every interval it asks the store (a RocksDB secondary) to catch up with the primary,
// reads the active version and, when that differs from the serving one, builds the new
// snapshot on this thread (off the request path) and swaps it into the holder. A version
// that fails to load is logged, counted and not retried until the active version changes
// again; the old snapshot keeps serving. Every round also follows the store's withdrawn items
// (a small read; the list itself only when it changed) into the holder.
//
// Every round also follows the canary (a candidate version served to a share of the subjects,
// store::Canary): the candidate's snapshot is built the same way, off the request path, and
// set beside the current one (SnapshotHolder::SetCanary); a new share only changes the share;
// a promotion swaps in the candidate's snapshot without building it again. A candidate that
// fails to load is counted and skipped like an active version, and nothing is served from it.
//
// With a VersionFeed instead of a store (plumb-serve --replica-of), a round asks the feed for
// the version to serve and loads it from the feed; the withdrawn items are those that came
// with the version. Counters and failure handling are the same, but for a NotFound: the
// store's is explained (a missing or damaged table file, or a version deleted right after it
// was named), a feed's is reported as the feed worded it.
#pragma once

#include <atomic>
#include <chrono>
#include <condition_variable>
#include <cstdint>
#include <functional>
#include <mutex>
#include <string>
#include <thread>
#include <vector>

#include "core/status.h"
#include "server/snapshot_holder.h"
#include "server/version_feed.h"

namespace plumb::store {
class Store;
}

namespace plumb::server {

struct CatchUpOptions {
  // Time between rounds.
  std::chrono::milliseconds interval{500};
  // Called on the loop's thread after a new snapshot became current, with the seconds
  // spent loading it. May be empty.
  std::function<void(const Snapshot& current, double load_seconds)> on_swap;
  // Called on the loop's thread when a version failed to load. May be empty.
  std::function<void(uint64_t version, const Status& why)> on_load_failure;
  // How often a round also checks the store's table files (Store::RecheckFiles): a follower
  // steps around a table file that is missing or damaged and stays at the older state
  // without an error, so only this check notices. Zero: every round. Costs one read of
  // the MANIFEST and of each table file's footer and index.
  std::chrono::milliseconds file_check_interval{60000};
  // Approximate indexes for large catalogues, built with each snapshot before its swap.
  ApproxServingOptions approx;
};

class CatchUpLoop {
 public:
  // `store` and `holder` are borrowed and must outlive the loop.
  CatchUpLoop(store::Store* store, SnapshotHolder* holder, CatchUpOptions options);
  // Follows `feed` (borrowed, must outlive the loop) instead of a store.
  CatchUpLoop(VersionFeed* feed, SnapshotHolder* holder, CatchUpOptions options);
  CatchUpLoop(const CatchUpLoop&) = delete;
  CatchUpLoop& operator=(const CatchUpLoop&) = delete;
  // Stops the thread if it runs.
  ~CatchUpLoop();

  // One round: catch up, check the table files when file_check_interval has passed, read
  // the active version, load and swap if it changed. Returns the first error of the round
  // (catch-up, damaged files, version read or load), OK otherwise, including when there was
  // nothing to do. Damaged files do not stop the round: the current snapshot keeps serving. Not to
  // be called concurrently with itself; main calls it once before Start() so that a server with a
  // version on disk is ready when it listens.
  Status RunOnce();

  // Starts the background thread, which calls RunOnce every interval, at niceness `nice`
  // (core/thread_priority.h; 0: the caller's): snapshot and index builds then yield the CPU
  // to request threads. Call at most once.
  void Start(int nice = 0);
  // Asks the thread to finish its round and joins it. Idempotent; call from one thread
  // (the owner), like the destructor.
  void Stop();

  // Counters, readable from any thread.
  uint64_t loads() const { return loads_.load(std::memory_order_relaxed); }
  uint64_t swaps() const { return swaps_.load(std::memory_order_relaxed); }
  uint64_t failed_loads() const { return failed_loads_.load(std::memory_order_relaxed); }
  // True while the last file check found damage (logged once per distinct finding).
  bool store_damaged() const { return store_damaged_.load(std::memory_order_relaxed); }

 private:
  void Run();
  // The store's part of a round: catch up with the primary (its error is returned), check the
  // table files when file_check_interval has passed (their damage into *damage, which does
  // not stop the round) and follow the withdrawn items.
  Status FollowStore(Status* damage);
  // Builds version `version`'s snapshot from the feed or the store into *out. A feed's version
  // brings its withdrawn items into *withdrawn; the store's are its own (RefreshWithdrawn).
  Status Load(uint64_t version, std::shared_ptr<const Snapshot>* out,
              std::vector<std::string>* withdrawn);
  // The version the feed or the store names active: loads and swaps it in when it changed.
  Status FollowActive();
  // Makes `next` (version `active`, loaded in `seconds`) the current snapshot, with the
  // withdrawn items that came with it from a feed, and logs and reports the swap.
  void SwapIn(uint64_t active, std::shared_ptr<const Snapshot> next,
              std::vector<std::string> withdrawn, double seconds);
  // Remembers `version` as failed (the active one, or the canary: not tried again until
  // another version is named), counts and logs the failure, tells on_load_failure, and
  // returns s.
  Status SkipFailedLoad(uint64_t version, bool canary, const Status& s);
  // The canary the feed or the store names (version 0: none): builds its snapshot, or takes
  // the current one or its own earlier one, and sets it with its share beside the current.
  Status FollowCanary();
  // The canary's snapshot when it is version `version` (a promotion), else null.
  std::shared_ptr<const Snapshot> CanaryAs(uint64_t version) const;
  // Rebuilds the holder's withdrawn set when the store's generation moved, or (swapped) for
  // the snapshot just swapped in.
  Status RefreshWithdrawn(bool swapped);

  store::Store* const store_;
  VersionFeed* const feed_ = nullptr;
  SnapshotHolder* const holder_;
  const CatchUpOptions options_;

  uint64_t failed_version_ = 0;  // last version that failed to load (loop thread only)
  uint64_t failed_canary_ = 0;   // last canary version that failed to load (loop thread only)
  std::vector<std::string> canary_withdrawn_;  // a feed's withdrawn items of the canary
  std::string last_catch_up_error_;
  std::string last_damage_;
  std::chrono::steady_clock::time_point next_file_check_{};

  std::atomic<uint64_t> loads_{0};
  std::atomic<uint64_t> swaps_{0};
  std::atomic<uint64_t> failed_loads_{0};
  std::atomic<bool> store_damaged_{false};

  std::mutex mu_;
  std::condition_variable wake_;
  bool stopping_ = false;
  std::thread thread_;
};

}  // namespace plumb::server
