// InflightCalls: counts the gRPC handlers running, so that shutdown knows when the last one
// has returned. gRPC's Server::Shutdown(deadline) alone waits until every client connection
// has gone, which an idle but connected client never does before the deadline; plumb-train
// waits for its own handlers instead and then closes the connections.
//
// Thread safety: all methods may be called from any thread.
#pragma once

#include <chrono>
#include <condition_variable>
#include <mutex>

namespace plumb::online {

class InflightCalls {
 public:
  // Held by a handler for its whole run. A default-constructed Scope is admitted and
  // tracks nothing (services without a tracker).
  class Scope {
   public:
    Scope() = default;
    Scope(Scope&& other) noexcept : owner_(other.owner_), admitted_(other.admitted_) {
      other.owner_ = nullptr;
    }
    Scope(const Scope&) = delete;
    Scope& operator=(const Scope&) = delete;
    Scope& operator=(Scope&& other) noexcept {
      if (this != &other) {
        if (owner_ != nullptr) owner_->Leave();
        owner_ = other.owner_;
        admitted_ = other.admitted_;
        other.owner_ = nullptr;
      }
      return *this;
    }
    ~Scope() {
      if (owner_ != nullptr) owner_->Leave();
    }
    // False once CloseAndWait() has begun: the handler must refuse the call (UNAVAILABLE).
    bool admitted() const { return admitted_; }

   private:
    friend class InflightCalls;
    Scope(InflightCalls* owner, bool admitted) : owner_(owner), admitted_(admitted) {}
    InflightCalls* owner_ = nullptr;
    bool admitted_ = true;
  };

  InflightCalls() = default;
  InflightCalls(const InflightCalls&) = delete;
  InflightCalls& operator=(const InflightCalls&) = delete;

  Scope Enter();

  // Refuses new handlers from now on and waits until the running ones have returned or
  // `deadline` has passed. True when none is running.
  bool CloseAndWait(std::chrono::steady_clock::time_point deadline);

  int running() const;

 private:
  void Leave();

  mutable std::mutex mu_;
  std::condition_variable idle_;
  int running_ = 0;
  bool closed_ = false;
};

// A Scope from `calls`, or an untracked admitted one when `calls` is null.
inline InflightCalls::Scope EnterCall(InflightCalls* calls) {
  return calls == nullptr ? InflightCalls::Scope() : calls->Enter();
}

}  // namespace plumb::online
