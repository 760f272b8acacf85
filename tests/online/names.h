// Test ids like "member-17". (Built with append rather than `"literal" + std::to_string(i)`,
// which trips a false -Wrestrict in GCC 12 at -O3, GCC bug 105329.)
#pragma once

#include <cstdint>
#include <string>
#include <string_view>

namespace plumb::online::testing {

inline std::string Name(std::string_view prefix, uint64_t i) {
  std::string s(prefix);
  s += std::to_string(i);
  return s;
}

}  // namespace plumb::online::testing
