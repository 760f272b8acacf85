// ReadWholeFile: the content of a small file a daemon reads once at start (a bearer token, a
// PEM certificate or key), with an error that names what the file was for.
#pragma once

#include <string>

#include "core/status.h"

namespace plumb::rpc {

// Reads `path` whole into *out. IoError "cannot read <what> file '<path>': <reason>" when it
// cannot be opened or read; *out is unchanged on error. Thread-safe.
Status ReadWholeFile(const std::string& path, const char* what, std::string* out);

}  // namespace plumb::rpc
