#include "trainer/online/group_commit.h"

#include <spdlog/spdlog.h>

#include <exception>
#include <string>
#include <string_view>
#include <unordered_set>
#include <utility>

namespace plumb::online {

GroupCommitter::GroupCommitter(EventLog* log, std::function<void()> on_appended,
                               const GroupCommitOptions& options)
    : log_(log), on_appended_(std::move(on_appended)), options_(options) {
  thread_ = std::thread([this] { Run(); });
}

GroupCommitter::~GroupCommitter() { Close(); }

std::future<CommitOutcome> GroupCommitter::Submit(std::vector<store::EventInput> events) {
  Request request;
  request.events = std::move(events);
  std::future<CommitOutcome> outcome = request.done.get_future();
  const size_t n = request.events.size();
  {
    std::unique_lock<std::mutex> lock(mu_);
    space_cv_.wait(lock, [&] {
      return closing_ || queued_events_ == 0 || queued_events_ + n <= options_.max_queued_events;
    });
    if (closing_) {
      lock.unlock();
      CommitOutcome refused;
      refused.status = Status::Unavailable("plumb-train is shutting down; nothing was stored");
      request.done.set_value(std::move(refused));
      return outcome;
    }
    request.queued_at = std::chrono::steady_clock::now();
    queued_events_ += n;
    queue_.push_back(std::move(request));
  }
  work_cv_.notify_one();
  return outcome;
}

void GroupCommitter::Close() {
  std::lock_guard<std::mutex> close_lock(close_mu_);
  {
    std::lock_guard<std::mutex> lock(mu_);
    closing_ = true;
  }
  work_cv_.notify_all();
  space_cv_.notify_all();
  if (thread_.joinable()) thread_.join();
}

CommitterStats GroupCommitter::stats() const {
  CommitterStats s;
  s.appended = appended_.load(std::memory_order_relaxed);
  s.duplicates = duplicates_.load(std::memory_order_relaxed);
  s.groups = groups_.load(std::memory_order_relaxed);
  s.failed_groups = failed_groups_.load(std::memory_order_relaxed);
  s.failed_events = failed_events_.load(std::memory_order_relaxed);
  s.last_seq = last_seq_.load(std::memory_order_relaxed);
  return s;
}

void GroupCommitter::Run() {
  std::vector<Request> group;
  for (;;) {
    {
      std::unique_lock<std::mutex> lock(mu_);
      work_cv_.wait(lock, [&] { return closing_ || !queue_.empty(); });
      if (queue_.empty()) return;  // closing, and everything queued has been written
      if (options_.window.count() > 0 && !closing_) {
        // Give other requests until the window after the oldest one to join; a group that
        // is already full goes at once. A request that waited behind the previous write
        // for longer than the window also goes at once.
        const auto deadline = queue_.front().queued_at + options_.window;
        work_cv_.wait_until(lock, deadline, [&] {
          return closing_ || queued_events_ >= options_.max_group_events;
        });
      }
      size_t events = 0;
      while (!queue_.empty() && (group.empty() || events + queue_.front().events.size() <=
                                                      options_.max_group_events)) {
        events += queue_.front().events.size();
        group.push_back(std::move(queue_.front()));
        queue_.pop_front();
      }
      queued_events_ -= events;
    }
    space_cv_.notify_all();
    CommitGroup(&group);
    group.clear();
  }
}

void GroupCommitter::CommitGroup(std::vector<Request>* group) {
  size_t total = 0;
  for (const Request& r : *group) total += r.events.size();

  // Two requests of one group may carry the same event_id (a client resending while its
  // first attempt is still queued). Only the first copy goes to the log; later copies are
  // duplicates of it, exactly as if they had come in a later group.
  std::vector<store::EventInput> batch;
  batch.reserve(total);  // no reallocation: the views in `seen` point into batch
  std::vector<char> dropped(total, 0);
  std::unordered_set<std::string_view> seen;
  size_t k = 0;
  for (Request& r : *group) {
    for (store::EventInput& e : r.events) {
      if (!e.event_id.empty()) {
        if (seen.count(e.event_id) != 0) {
          dropped[k++] = 1;
          continue;
        }
        batch.push_back(std::move(e));
        seen.insert(batch.back().event_id);
      } else {
        batch.push_back(std::move(e));
      }
      ++k;
    }
  }

  store::AppendResult result;
  Status status;
  if (!batch.empty()) {
    try {
      status = log_->Append(batch, &result);
    } catch (const std::exception& e) {
      status = Status::Aborted(std::string("event log append threw: ") + e.what());
    }
    if (status.ok() && result.duplicate.size() != batch.size()) {
      status =
          Status::Aborted("event log append reported " + std::to_string(result.duplicate.size()) +
                          " outcomes for " + std::to_string(batch.size()) + " events");
    }
  } else {
    result.last_seq = log_->LastSequence();
  }

  if (!status.ok()) {
    failed_groups_.fetch_add(1, std::memory_order_relaxed);
    failed_events_.fetch_add(total, std::memory_order_relaxed);
    if (episode_groups_++ == 0) {
      spdlog::error(
          "appending events to the log failed: {}; the {} events of this write are refused "
          "(their callers get the error and must retry; nothing is acknowledged). Logged once "
          "until a write succeeds again; see plumb_event_log_write_failures_total",
          status.ToString(), total);
    }
    episode_events_ += total;
    for (Request& r : *group) {
      CommitOutcome outcome;
      outcome.status = status;
      r.done.set_value(std::move(outcome));
    }
    return;
  }

  // Only a write that stored something shows the log works again (a group of duplicates
  // writes nothing).
  if (episode_groups_ > 0 && result.appended > 0) {
    spdlog::info(
        "appending events to the log works again, after {} failed writes that refused {} "
        "events",
        episode_groups_, episode_events_);
    episode_groups_ = 0;
    episode_events_ = 0;
  }

  uint64_t group_appended = 0, group_duplicates = 0;
  std::vector<CommitOutcome> outcomes(group->size());
  size_t b = 0;
  k = 0;
  for (size_t j = 0; j < group->size(); ++j) {
    Request& r = (*group)[j];
    CommitOutcome& outcome = outcomes[j];
    outcome.last_seq = result.last_seq;
    for (size_t i = 0; i < r.events.size(); ++i, ++k) {
      if (dropped[k]) {
        ++outcome.duplicates;  // a dropped copy has no entry in batch
      } else if (result.duplicate[b++]) {
        ++outcome.duplicates;
      } else {
        ++outcome.appended;
      }
    }
    group_appended += outcome.appended;
    group_duplicates += outcome.duplicates;
  }
  // Totals and the loop's wake-up come before the acknowledgements, so that whoever has
  // been acknowledged also sees them.
  appended_.fetch_add(group_appended, std::memory_order_relaxed);
  duplicates_.fetch_add(group_duplicates, std::memory_order_relaxed);
  groups_.fetch_add(1, std::memory_order_relaxed);
  last_seq_.store(result.last_seq, std::memory_order_relaxed);
  if (group_appended > 0 && on_appended_) on_appended_();
  for (size_t j = 0; j < group->size(); ++j) (*group)[j].done.set_value(std::move(outcomes[j]));
}

}  // namespace plumb::online
