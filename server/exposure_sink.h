// ExposureSink: where plumb-serve reports every list it serves, so that exposure
// concentration on popular items can be watched live (DESIGN.md §6).
//
// The service calls Record once per successful response of every method (Recommend,
// including fallback lists, RankCandidates and SimilarItems), with the served item indexes
// in the snapshot that scored them. ExposureCounter is the minimal implementation; the
// sliding-window exposure monitor implements the same interface.
#pragma once

#include <atomic>
#include <cstdint>
#include <span>

#include "server/snapshot.h"

namespace plumb::server {

class ExposureSink {
 public:
  virtual ~ExposureSink() = default;

  // Counts one served list. `items` are indexes into `snap`'s items, best first; both are
  // only borrowed for the call. Called concurrently from every request thread, on the
  // request path: implementations must be thread-safe and cheap (no blocking I/O).
  virtual void Record(const Snapshot& snap, std::span<const uint32_t> items) = 0;
};

// Counts served lists and served slots (items in them). Lock-free.
class ExposureCounter final : public ExposureSink {
 public:
  void Record(const Snapshot& snap, std::span<const uint32_t> items) override {
    lists_.fetch_add(1, std::memory_order_relaxed);
    slots_.fetch_add(items.size(), std::memory_order_relaxed);
  }

  uint64_t lists() const { return lists_.load(std::memory_order_relaxed); }
  uint64_t slots() const { return slots_.load(std::memory_order_relaxed); }

 private:
  std::atomic<uint64_t> lists_{0};
  std::atomic<uint64_t> slots_{0};
};

}  // namespace plumb::server
