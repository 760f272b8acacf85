// UtcText: a time stamp of plumb's clock (core/clock.h: milliseconds since the Unix epoch) as
// text in UTC, the one formatter behind every time stamp the programs print or show. Pure and
// thread-safe (gmtime_r).
#pragma once

#include <cstdint>
#include <ctime>
#include <string>

namespace plumb {

// `ms` in UTC through strftime's `format`, e.g. "%Y-%m-%d %H:%M:%S UTC" -> "2026-12-02
// 21:30:05 UTC" (whole seconds, rounded down). The text is cut at 63 bytes.
inline std::string UtcText(int64_t ms, const char* format) {
  const std::time_t seconds = static_cast<std::time_t>(ms / 1000);
  std::tm utc{};
  gmtime_r(&seconds, &utc);
  char text[64];
  const size_t n = std::strftime(text, sizeof text, format, &utc);
  return std::string(text, n);
}

}  // namespace plumb
