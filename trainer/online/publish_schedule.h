// PublishSchedule: when the online loop publishes a candidate. It counts what was learned
// since the last publish (events folded in, samples trained) and says a publish is due when
// one was requested, or when something was learned and either enough events arrived
// (every_events) or enough time passed (every_seconds) since the last publish. Whether the
// loop may publish at all (enough training pairs, no configuration change waiting for its
// rebuild) is the loop's to decide.
//
// Times are passed in, so the rule can be checked without waiting. Not thread-safe: the
// training thread owns it.
#pragma once

#include <chrono>
#include <cstdint>

namespace plumb::online {

class PublishSchedule {
 public:
  using Clock = std::chrono::steady_clock;

  // `start` counts as the last publish.
  PublishSchedule(uint64_t every_events, double every_seconds, Clock::time_point start)
      : every_events_(every_events), every_seconds_(every_seconds), last_publish_(start) {}

  void AddEvents(uint64_t n) { events_ += n; }
  void AddSamples(uint64_t n) { samples_ += n; }

  // Whether events or samples arrived since the last publish.
  bool HasUnpublished() const { return events_ > 0 || samples_ > 0; }

  // A requested publish is always due (even with nothing new); otherwise one is due when
  // HasUnpublished() and either every_events events arrived or every_seconds passed by `now`.
  bool Due(bool requested, Clock::time_point now) const;

  // A publish was committed at `now`: the counts start again.
  void Published(Clock::time_point now) {
    events_ = 0;
    samples_ = 0;
    last_publish_ = now;
  }

 private:
  uint64_t every_events_;
  double every_seconds_;
  Clock::time_point last_publish_;
  uint64_t events_ = 0;
  uint64_t samples_ = 0;
};

}  // namespace plumb::online
