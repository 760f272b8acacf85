// The config-file keys a CLI11 --help text offers: every "--flag" option except --help,
// --version and --config, with '-' turned into '_' (how the TOML files spell them). A
// boolean's "--x,--no-x" line gives the key x. Shared by the tests that
// check an example configuration file names every key.
#pragma once

#include <cctype>
#include <sstream>
#include <string>
#include <vector>

namespace plumb::testing {

inline std::vector<std::string> HelpKeys(const std::string& help) {
  std::vector<std::string> keys;
  std::stringstream lines(help);
  for (std::string line; std::getline(lines, line);) {
    const size_t at = line.find("  --");
    if (at == std::string::npos || line.find("--help") != std::string::npos ||
        line.find("--config") != std::string::npos || line.compare(at, 11, "  --version") == 0) {
      continue;
    }
    std::string key;
    for (size_t i = at + 4;
         i < line.size() && (std::isalnum(static_cast<unsigned char>(line[i])) || line[i] == '-');
         ++i) {
      key += line[i] == '-' ? '_' : line[i];
    }
    keys.push_back(key);
  }
  return keys;
}

}  // namespace plumb::testing
