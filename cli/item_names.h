// ItemNames: display names for item ids, from an `item,name` CSV such as the items.csv that
// `plumb synth` writes. Only for showing lists to people; the service never sees names.
#pragma once

#include <string>
#include <unordered_map>

#include "core/status.h"

namespace plumb::cli {

class ItemNames {
 public:
  // Reads a CSV whose header names the columns `item` and `name` (others are ignored;
  // quoting and the byte-order mark as in cli/csv_reader.h). NotFound when the file cannot be
  // opened; InvalidArgument naming file and line for a malformed line or a missing column.
  static Status Read(const std::string& path, ItemNames* out);

  // The name of `item`, or "" when the file did not list it.
  const std::string& Find(const std::string& item) const;

  size_t size() const { return names_.size(); }

 private:
  std::unordered_map<std::string, std::string> names_;
};

}  // namespace plumb::cli
