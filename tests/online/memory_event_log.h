// An in-memory EventLog for tests: appends with event_id de-duplication (the contract of
// store::Store::AppendEvents), optional failure injection and an optional write delay (to
// let groups form as they do behind a real fsync).
#pragma once

#include <chrono>
#include <mutex>
#include <string>
#include <thread>
#include <unordered_map>
#include <vector>

#include "trainer/online/group_commit.h"

namespace plumb::online::testing {

class MemoryEventLog final : public EventLog {
 public:
  Status Append(std::span<const store::EventInput> events, store::AppendResult* result) override {
    if (delay_.count() > 0) std::this_thread::sleep_for(delay_);
    std::lock_guard<std::mutex> lock(mu_);
    ++append_calls_;
    if (!failure_.ok()) return failure_;  // nothing appended, as the contract requires
    *result = store::AppendResult();
    for (const store::EventInput& e : events) {
      if (!e.event_id.empty()) {
        auto it = ids_.find(e.event_id);
        if (it != ids_.end()) {
          result->seqs.push_back(it->second);
          result->duplicate.push_back(true);
          ++result->duplicates;
          continue;
        }
      }
      events_.push_back(e);
      const uint64_t seq = events_.size();
      if (!e.event_id.empty()) ids_.emplace(e.event_id, seq);
      result->seqs.push_back(seq);
      result->duplicate.push_back(false);
      ++result->appended;
    }
    result->last_seq = events_.size();
    return Status::Ok();
  }

  uint64_t LastSequence() const override {
    std::lock_guard<std::mutex> lock(mu_);
    return events_.size();
  }

  void set_failure(Status s) {
    std::lock_guard<std::mutex> lock(mu_);
    failure_ = std::move(s);
  }
  void set_delay(std::chrono::microseconds d) { delay_ = d; }
  std::vector<store::EventInput> events() const {
    std::lock_guard<std::mutex> lock(mu_);
    return events_;
  }
  size_t size() const {
    std::lock_guard<std::mutex> lock(mu_);
    return events_.size();
  }
  int append_calls() const {
    std::lock_guard<std::mutex> lock(mu_);
    return append_calls_;
  }

 private:
  mutable std::mutex mu_;
  std::vector<store::EventInput> events_;
  std::unordered_map<std::string, uint64_t> ids_;
  Status failure_;
  int append_calls_ = 0;
  std::chrono::microseconds delay_{0};
};

}  // namespace plumb::online::testing
