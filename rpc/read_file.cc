#include "rpc/read_file.h"

#include <cerrno>
#include <cstring>
#include <fstream>
#include <sstream>

namespace plumb::rpc {

Status ReadWholeFile(const std::string& path, const char* what, std::string* out) {
  const std::string where = std::string(what) + " file '" + path + "'";
  std::ifstream in(path, std::ios::binary);
  if (!in) return Status::IoError("cannot read " + where + ": " + std::strerror(errno));
  std::ostringstream content;
  content << in.rdbuf();
  if (in.bad()) return Status::IoError("error reading " + where);
  *out = content.str();
  return Status::Ok();
}

}  // namespace plumb::rpc
