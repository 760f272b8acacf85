// NowMs: the wall-clock time in milliseconds since the Unix epoch (std::chrono::system_clock),
// the one clock of every stored or shown time stamp (event receive times, version creation,
// retention). Durations and deadlines use std::chrono::steady_clock instead. Thread-safe.
#pragma once

#include <chrono>
#include <cstdint>

namespace plumb {

inline int64_t NowMs() {
  return std::chrono::duration_cast<std::chrono::milliseconds>(
             std::chrono::system_clock::now().time_since_epoch())
      .count();
}

}  // namespace plumb
