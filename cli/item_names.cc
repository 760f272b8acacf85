#include "cli/item_names.h"

#include <fstream>
#include <optional>
#include <vector>

#include "cli/csv_reader.h"

namespace plumb::cli {

Status ItemNames::Read(const std::string& path, ItemNames* out) {
  std::ifstream in;
  std::string line;
  std::vector<std::string> fields;
  PLUMB_RETURN_IF_ERROR(OpenCsv(path, &in, &line, &fields));
  std::optional<size_t> item_col, name_col;
  for (size_t c = 0; c < fields.size(); ++c) {
    if (fields[c] == "item") item_col = c;
    if (fields[c] == "name") name_col = c;
  }
  if (!item_col || !name_col) {
    return MissingColumnsError(path, "'item' and 'name'", line);
  }
  ItemNames names;
  uint64_t line_no = 1;
  while (std::getline(in, line)) {
    ++line_no;
    if (line.empty() || line == "\r") continue;
    if (Status s = SplitCsvLine(line, &fields); !s.ok()) {
      return Status::InvalidArgument(path + ":" + std::to_string(line_no) + ": " + s.message());
    }
    if (fields.size() <= std::max(*item_col, *name_col)) {
      return Status::InvalidArgument(path + ":" + std::to_string(line_no) + ": expected " +
                                     std::to_string(std::max(*item_col, *name_col) + 1) +
                                     " fields, found " + std::to_string(fields.size()));
    }
    names.names_[fields[*item_col]] = fields[*name_col];
  }
  *out = std::move(names);
  return Status::Ok();
}

const std::string& ItemNames::Find(const std::string& item) const {
  static const std::string kNone;
  const auto it = names_.find(item);
  return it == names_.end() ? kNone : it->second;
}

}  // namespace plumb::cli
