// Where a load run gets the ids it asks about: a plain file, or the dictionaries of a
// plumb store (the users and items its active version knows).
#pragma once

#include <string>
#include <vector>

#include "core/status.h"

namespace plumb::tools {

// Reads one id per line. Surrounding whitespace is trimmed and empty lines are skipped; a
// line holding a comma keeps its first field, so the first column of a CSV works too
// (a header line then counts as an id: strip it, or use a plain list). A leading UTF-8
// byte-order mark is ignored.
// NotFound when the file cannot be opened; InvalidArgument (naming file and line) for an
// id over 256 bytes or a file without any id.
Status ReadIdFile(const std::string& path, std::vector<std::string>* ids);

// Loads the external user and item ids the store's active version was trained on, opening
// `db` as a RocksDB secondary (safe while plumb-train writes it) with a scratch directory
// of its own that is removed afterwards. Either output may be null.
// NotFound when there is no store at `db`, FailedPrecondition when no version is active.
Status ReadActiveIds(const std::string& db, std::vector<std::string>* users,
                     std::vector<std::string>* items);

}  // namespace plumb::tools
