#include "core/duration.h"

#include <charconv>

namespace plumb {

Status ParseDuration(std::string_view text, int64_t* ms) {
  if (text == "0") {
    *ms = 0;
    return Status::Ok();
  }
  double number = 0;
  const char* begin = text.data();
  const char* end = text.data() + text.size();
  auto [rest, ec] = std::from_chars(begin, end, number);
  if (ec != std::errc() || rest == begin || number < 0) {
    return Status::InvalidArgument("duration '" + std::string(text) +
                                   "' is not of the form 250ms, 90s, 30m, 24h, 7d or 0");
  }
  const std::string_view unit(rest, static_cast<size_t>(end - rest));
  double scale;
  if (unit == "ms") {
    scale = 1;
  } else if (unit == "s") {
    scale = 1e3;
  } else if (unit == "m") {
    scale = 60e3;
  } else if (unit == "h") {
    scale = 3600e3;
  } else if (unit == "d") {
    scale = 86400e3;
  } else {
    return Status::InvalidArgument("duration '" + std::string(text) +
                                   "' needs a unit: ms, s, m, h or d");
  }
  *ms = static_cast<int64_t>(number * scale + 0.5);
  return Status::Ok();
}

Status ParseDurationIn(std::string_view name, std::string_view text, int64_t min_ms, int64_t max_ms,
                       int64_t* ms) {
  if (Status s = ParseDuration(text, ms); !s.ok()) {
    return Status::InvalidArgument(std::string(name) + ": " + s.message());
  }
  if (*ms < min_ms || *ms > max_ms) {
    return Status::InvalidArgument(std::string(name) + ": " + std::string(text) + " is outside [" +
                                   FormatDuration(min_ms) + ", " + FormatDuration(max_ms) + "]");
  }
  return Status::Ok();
}

std::string FormatDuration(int64_t ms) {
  if (ms == 0) return "0";
  struct Unit {
    int64_t ms;
    const char* name;
  };
  for (const Unit& u :
       {Unit{86'400'000, "d"}, Unit{3'600'000, "h"}, Unit{60'000, "m"}, Unit{1'000, "s"}}) {
    if (ms % u.ms == 0) return std::to_string(ms / u.ms) + u.name;
  }
  return std::to_string(ms) + "ms";
}

}  // namespace plumb
