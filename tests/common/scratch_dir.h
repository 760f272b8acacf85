// ScratchDir: a fresh directory for one test (under $TMPDIR, else /tmp), removed with
// everything in it when the object goes out of scope. The one scratch-directory helper of
// every suite.
#pragma once

#include <cstdlib>
#include <filesystem>
#include <string>

namespace plumb::testing {

class ScratchDir {
 public:
  ScratchDir() {
    std::string pattern = (std::filesystem::temp_directory_path() / "plumb-test-XXXXXX").string();
    if (::mkdtemp(pattern.data()) == nullptr) std::abort();
    path_ = pattern;
  }
  ~ScratchDir() {
    std::error_code ec;
    std::filesystem::remove_all(path_, ec);
  }
  ScratchDir(const ScratchDir&) = delete;
  ScratchDir& operator=(const ScratchDir&) = delete;

  const std::string& path() const { return path_; }
  // A path inside the directory (not created).
  std::string Sub(const std::string& name) const { return path_ + "/" + name; }

 private:
  std::string path_;
};

}  // namespace plumb::testing
