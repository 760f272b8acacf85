// Group commit for the event log: many concurrent ingest calls hand over validated events,
// one committer thread appends them to the log in groups (one durable write per group), and
// each submitter learns the outcome of the write that carried its events. One fsync then
// pays for many requests, which is what makes durable ingest fast.
//
// A submitter is told "stored" only after the append returned OK; when an append fails,
// every submitter in that group receives the error and nothing of theirs is reported as
// stored (the store's append is atomic: on error nothing of the group was written).
//
// Failed appends (a full disk, a device error) are logged once per episode: an error with
// the first failure, then nothing while appends keep failing, then one line when an
// append succeeds again saying how many appends and events the episode refused. They are
// counted in CommitterStats (failed_groups, failed_events) for the metrics.
#pragma once

#include <atomic>
#include <chrono>
#include <condition_variable>
#include <cstdint>
#include <deque>
#include <functional>
#include <future>
#include <mutex>
#include <span>
#include <thread>
#include <vector>

#include "core/status.h"
#include "store/store.h"

namespace plumb::online {

// Where the committer writes. The production implementation is StoreEventLog over
// store::Store; tests substitute an in-memory or failing log.
class EventLog {
 public:
  virtual ~EventLog() = default;
  // Same contract as store::Store::AppendEvents: one atomic, durable append of `events`
  // with de-duplication by event_id; on error nothing was appended. `result` gets one
  // duplicate flag per input.
  virtual Status Append(std::span<const store::EventInput> events, store::AppendResult* result) = 0;
  // Highest sequence number in the log, 0 when empty.
  virtual uint64_t LastSequence() const = 0;
};

// EventLog over a primary store. `store` must outlive this object.
class StoreEventLog final : public EventLog {
 public:
  explicit StoreEventLog(store::Store* store) : store_(store) {}
  Status Append(std::span<const store::EventInput> events, store::AppendResult* result) override {
    return store_->AppendEvents(events, result);
  }
  uint64_t LastSequence() const override { return store_->LastSequence(); }

 private:
  store::Store* store_;
};

struct GroupCommitOptions {
  // How long the committer waits after the first queued request of a group for others to
  // join it. 0: append whatever is queued at once (groups still form while a write is in
  // flight, since requests queue up behind it).
  std::chrono::microseconds window{2000};
  // A group is closed early when it holds this many events. A single larger request is
  // still appended whole (a request is never split across writes).
  size_t max_group_events = 16384;
  // Submit() blocks while this many events wait in the queue (back-pressure on clients
  // that stream faster than the disk).
  size_t max_queued_events = 1 << 20;
};

// The outcome of one Submit().
struct CommitOutcome {
  Status status;            // not OK: none of the request's events is acknowledged
  uint64_t appended = 0;    // events newly written to the log
  uint64_t duplicates = 0;  // events whose event_id was already in the log (or earlier in
                            // the same group): not written again, safely acknowledged
  uint64_t last_seq = 0;    // highest log sequence after the write
};

// Running totals since construction, for metrics.
struct CommitterStats {
  uint64_t appended = 0;
  uint64_t duplicates = 0;
  uint64_t groups = 0;         // successful appends
  uint64_t failed_groups = 0;  // appends that returned an error
  uint64_t failed_events = 0;  // events in those appends (none of them acknowledged)
  uint64_t last_seq = 0;
};

class GroupCommitter {
 public:
  // `log` must outlive the committer. `on_appended`, when set, is called on the committer
  // thread after every successful append that wrote at least one event (plumb-train wakes
  // the training loop with it). Starts the committer thread.
  GroupCommitter(EventLog* log, std::function<void()> on_appended,
                 const GroupCommitOptions& options);
  GroupCommitter(const GroupCommitter&) = delete;
  GroupCommitter& operator=(const GroupCommitter&) = delete;
  ~GroupCommitter();  // calls Close()

  // Queues `events` (already validated) for the next group and returns at once with a
  // future for the outcome; blocks only while the queue is over max_queued_events. After
  // Close() the outcome is Unavailable at once. Thread-safe.
  std::future<CommitOutcome> Submit(std::vector<store::EventInput> events);

  // Stops accepting, appends everything already queued, and joins the committer thread.
  // Idempotent; thread-safe.
  void Close();

  CommitterStats stats() const;
  uint64_t LastSequence() const { return log_->LastSequence(); }

 private:
  struct Request {
    std::vector<store::EventInput> events;
    std::promise<CommitOutcome> done;
    std::chrono::steady_clock::time_point queued_at;
  };

  void Run();
  void CommitGroup(std::vector<Request>* group);

  EventLog* const log_;
  const std::function<void()> on_appended_;
  const GroupCommitOptions options_;

  mutable std::mutex mu_;
  std::condition_variable work_cv_;   // committer waits for requests
  std::condition_variable space_cv_;  // submitters wait for queue space
  std::deque<Request> queue_;
  size_t queued_events_ = 0;
  bool closing_ = false;

  std::atomic<uint64_t> appended_{0};
  std::atomic<uint64_t> duplicates_{0};
  std::atomic<uint64_t> groups_{0};
  std::atomic<uint64_t> failed_groups_{0};
  std::atomic<uint64_t> failed_events_{0};
  std::atomic<uint64_t> last_seq_{0};
  // The current failure episode (committer thread only): appends and events refused since
  // the last successful append.
  uint64_t episode_groups_ = 0;
  uint64_t episode_events_ = 0;

  std::mutex close_mu_;
  std::thread thread_;
};

}  // namespace plumb::online
