// Durations as people write them in flags and configuration files: a number and a unit.
#pragma once

#include <cstdint>
#include <string>
#include <string_view>

#include "core/status.h"

namespace plumb {

// "250ms", "1.5s", "30m", "24h", "7d" or "0" -> milliseconds (rounded to the nearest).
// InvalidArgument, naming the text and the accepted forms, for a missing or unknown unit, a
// negative number or anything else.
Status ParseDuration(std::string_view text, int64_t* ms);

// ParseDuration for the value of a flag or key `name`, also checking min_ms <= value <=
// max_ms. InvalidArgument "NAME: ..." naming the accepted forms or the range otherwise.
Status ParseDurationIn(std::string_view name, std::string_view text, int64_t min_ms, int64_t max_ms,
                       int64_t* ms);

// The shortest of those forms that reads back as `ms` exactly, e.g. 7'200'000 -> "2h",
// 1'500 -> "1500ms", 0 -> "0".
std::string FormatDuration(int64_t ms);

}  // namespace plumb
