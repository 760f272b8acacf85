#include "config/flag_file.h"

#include <toml++/toml.h>

#include <cstdio>
#include <sstream>

namespace plumb::config {

namespace {

std::string KeyName(std::string_view key) {
  std::string name(key);
  for (char& c : name) {
    if (c == '-') c = '_';
  }
  return name;
}

std::string NumberText(double v) {
  std::ostringstream text;
  text.precision(std::numeric_limits<double>::max_digits10);
  text << v;
  return text.str();
}

}  // namespace

std::string FlagFile::FlagName(std::string_view key) {
  std::string flag = "--";
  for (char c : key) flag += c == '_' ? '-' : c;
  return flag;
}

std::string FlagFile::DefaultText(const std::vector<double>& values) {
  std::string shown;
  for (double v : values) {
    char buf[32];
    std::snprintf(buf, sizeof buf, "%s%g", shown.empty() ? "" : ",", v);
    shown += buf;
  }
  return shown.empty() ? "none" : shown;
}

CLI::Option* FlagFile::AddOption(std::string_view key, CLI::Option* option, Kind kind) {
  keys_.push_back({KeyName(key), option, kind});
  return option;
}

namespace {

// The texts a flag would carry for `node`, or an error text (empty when fine).
template <typename Kind>
std::string Texts(const toml::node& node, const Kind& kind, std::vector<std::string>* texts) {
  switch (kind.type) {
    case Kind::kBool:
      if (auto v = node.value_exact<bool>()) {
        texts->push_back(*v ? "true" : "false");
        return {};
      }
      return "expects true or false";
    case Kind::kString:
      if (auto v = node.value_exact<std::string>()) {
        texts->push_back(*v);
        return {};
      }
      return "expects a string";
    case Kind::kInteger: {
      auto v = node.value_exact<int64_t>();
      if (!v) return "expects an integer";
      if (*v < 0 && kind.min == 0) return "must not be negative";
      if (*v < kind.min) return "is too small";
      if (*v > 0 && static_cast<uint64_t>(*v) > kind.max) return "is too large";
      texts->push_back(std::to_string(*v));
      return {};
    }
    case Kind::kNumber:
      if (auto v = node.value<double>()) {  // integers are accepted for numbers
        texts->push_back(NumberText(*v));
        return {};
      }
      return "expects a number";
    case Kind::kNumberList: {
      const toml::array* array = node.as_array();
      if (array == nullptr) return "expects an array of numbers, e.g. [1, 2, 3]";
      for (const toml::node& element : *array) {
        auto v = element.value<double>();
        if (!v) return "expects an array of numbers, e.g. [1, 2, 3]";
        texts->push_back(NumberText(*v));
      }
      return {};
    }
  }
  return "has an unsupported type";
}

}  // namespace

Status FlagFile::Apply(const std::string& path) const {
  const std::string file = "config file '" + path + "'";
  toml::table table;
  try {
    table = toml::parse_file(path);
  } catch (const toml::parse_error& e) {
    return Status::InvalidArgument(file + " line " + std::to_string(e.source().begin.line) + ": " +
                                   std::string(e.description()));
  }
  for (const auto& [raw_key, node] : table) {
    const std::string where = file + " line " + std::to_string(node.source().begin.line) + ": ";
    const std::string name = KeyName(raw_key.str());
    const Key* key = nullptr;
    for (const Key& k : keys_) {
      if (k.name == name) key = &k;
    }
    if (key == nullptr) {
      return Status::InvalidArgument(where + "unknown key '" + std::string(raw_key.str()) +
                                     "' (see --help)");
    }
    if (key->option->count() > 0) continue;  // the command line wins
    std::vector<std::string> texts;
    if (std::string error = Texts(node, key->kind, &texts); !error.empty()) {
      return Status::InvalidArgument(where + "key '" + std::string(raw_key.str()) + "' " + error);
    }
    try {
      key->option->add_result(texts);
      key->option->run_callback();
    } catch (const CLI::Error& e) {
      return Status::InvalidArgument(where + "key '" + std::string(raw_key.str()) +
                                     "': " + e.what());
    }
  }
  return Status::Ok();
}

}  // namespace plumb::config
