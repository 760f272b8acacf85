// CountText: how often a text occurs in another (overlapping occurrences counted), for
// suites that count marks, rows or cells in rendered pages.
#pragma once

#include <cstddef>
#include <string>

namespace plumb::testing {

inline size_t CountText(const std::string& haystack, const std::string& needle) {
  size_t n = 0;
  for (size_t i = haystack.find(needle); i != std::string::npos; i = haystack.find(needle, i + 1)) {
    ++n;
  }
  return n;
}

}  // namespace plumb::testing
