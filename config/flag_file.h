// FlagFile: command-line options that are also keys of a TOML configuration file.
//
// Each setting added with Add is a flag `--NAME` (words joined by '-') and a top-level key
// `NAME` of the file (words joined by '_'; '-' is accepted too). After CLI::App::parse,
// Apply(path) sets every key of the file whose flag the command line did not give: a flag
// wins over the file, the file over the built-in default. A file value goes through the
// option's own conversion and checks (CLI::Range, CLI::IsMember, ...), so the file cannot
// set what the flag would refuse. Booleans are --x / --no-x switches on the command line and
// true / false in the file; durations are texts with a unit in both (core/duration.h).
//
// Not thread-safe; use it from the thread that parses the command line.
#pragma once

#include <CLI/CLI.hpp>
#include <cstdint>
#include <limits>
#include <string>
#include <string_view>
#include <type_traits>
#include <vector>

#include "core/status.h"

namespace plumb::config {

class FlagFile {
 public:
  // `app` must outlive this object.
  explicit FlagFile(CLI::App* app) : app_(app) {}

  // Adds the option `--NAME` for *field (`key` spelled with '_' or '-'), showing the current
  // value of *field as its default in --help, and makes `key` a key of the file. A bool is
  // the switch pair --NAME / --no-NAME; a vector<double> takes comma-separated numbers (an
  // array in the file). Returns the option, for checks and groups. *field must outlive the
  // parse and Apply.
  template <typename T>
  CLI::Option* Add(std::string_view key, T* field, const std::string& help);

  // Reads the TOML file at `path` and applies its keys as described above. InvalidArgument
  // "config file 'PATH' line N: ..." for a file that cannot be read or parsed, an unknown
  // key (naming it), a value of the wrong type (naming the key and the type expected) or one
  // the option refuses; *field of the keys before the bad one may have been set.
  Status Apply(const std::string& path) const;

  // "--" + key with '_' replaced by '-'.
  static std::string FlagName(std::string_view key);

 private:
  // What a key's TOML value must be.
  struct Kind {
    enum Type { kBool, kString, kInteger, kNumber, kNumberList } type;
    int64_t min = 0;   // kInteger
    uint64_t max = 0;  // kInteger
  };
  struct Key {
    std::string name;  // with '_'
    CLI::Option* option;
    Kind kind;
  };

  template <typename T>
  static Kind KindOf();
  CLI::Option* AddOption(std::string_view key, CLI::Option* option, Kind kind);
  static std::string DefaultText(const std::vector<double>& values);

  CLI::App* app_;
  std::vector<Key> keys_;
};

template <typename T>
FlagFile::Kind FlagFile::KindOf() {
  if constexpr (std::is_same_v<T, bool>) {
    return {Kind::kBool};
  } else if constexpr (std::is_same_v<T, std::string>) {
    return {Kind::kString};
  } else if constexpr (std::is_same_v<T, std::vector<double>>) {
    return {Kind::kNumberList};
  } else if constexpr (std::is_integral_v<T>) {
    return {Kind::kInteger, static_cast<int64_t>(std::numeric_limits<T>::min()),
            static_cast<uint64_t>(std::numeric_limits<T>::max())};
  } else {
    static_assert(std::is_floating_point_v<T>, "FlagFile::Add: unsupported field type");
    return {Kind::kNumber};
  }
}

template <typename T>
CLI::Option* FlagFile::Add(std::string_view key, T* field, const std::string& help) {
  const std::string flag = FlagName(key);
  CLI::Option* option;
  if constexpr (std::is_same_v<T, bool>) {
    option = app_->add_flag(flag + ",!--no-" + flag.substr(2), *field, help);
  } else if constexpr (std::is_same_v<T, std::vector<double>>) {
    option = app_->add_option(flag, *field, help)->delimiter(',')->default_str(DefaultText(*field));
  } else {
    option = app_->add_option(flag, *field, help)->capture_default_str();
  }
  return AddOption(key, option, KindOf<T>());
}

}  // namespace plumb::config
