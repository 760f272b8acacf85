#include "tools/id_source.h"

#include <stdlib.h>

#include <filesystem>
#include <fstream>
#include <memory>

#include "cli/csv_reader.h"
#include "store/store.h"

namespace plumb::tools {
namespace {

constexpr size_t kMaxIdBytes = 256;  // the wire limit of user_id / item_id (ranker.proto)

std::string_view Trim(std::string_view s) {
  const auto space = [](char c) { return c == ' ' || c == '\t' || c == '\r' || c == '\n'; };
  while (!s.empty() && space(s.front())) s.remove_prefix(1);
  while (!s.empty() && space(s.back())) s.remove_suffix(1);
  return s;
}

}  // namespace

Status ReadIdFile(const std::string& path, std::vector<std::string>* ids) {
  std::ifstream in(path);
  if (!in) return Status::NotFound("cannot open " + path);
  ids->clear();
  std::string line;
  uint64_t line_no = 0;
  while (std::getline(in, line)) {
    ++line_no;
    std::string_view id = line;
    if (line_no == 1) id = cli::StripUtf8Bom(id);  // spreadsheets' "CSV UTF-8"
    if (const size_t comma = id.find(','); comma != std::string_view::npos)
      id = id.substr(0, comma);
    id = Trim(id);
    if (id.empty()) continue;
    if (id.size() > kMaxIdBytes) {
      return Status::InvalidArgument(path + ":" + std::to_string(line_no) + ": id is " +
                                     std::to_string(id.size()) + " bytes, the limit is 256");
    }
    ids->emplace_back(id);
  }
  if (in.bad()) return Status::IoError("error reading " + path);
  if (ids->empty()) return Status::InvalidArgument(path + " holds no ids");
  return Status::Ok();
}

Status ReadActiveIds(const std::string& db, std::vector<std::string>* users,
                     std::vector<std::string>* items) {
  std::error_code ec;
  if (!std::filesystem::is_directory(db, ec)) return Status::NotFound("no store at " + db);
  std::filesystem::path base = std::filesystem::temp_directory_path(ec);
  if (ec) base = "/tmp";
  std::string scratch = (base / "plumb-load-XXXXXX").string();
  if (::mkdtemp(scratch.data()) == nullptr) {
    return Status::IoError("cannot create a scratch directory under " + base.string());
  }
  Status s = [&]() -> Status {
    std::unique_ptr<store::Store> store;
    PLUMB_RETURN_IF_ERROR(store::Store::OpenSecondary(db, scratch, &store));
    uint64_t active = 0;
    PLUMB_RETURN_IF_ERROR(store->GetActiveVersion(&active));
    if (active == 0) {
      return Status::FailedPrecondition("the store at " + db + " has no active version yet");
    }
    store::VersionManifest manifest;
    PLUMB_RETURN_IF_ERROR(store->ReadManifest(active, &manifest));
    // A version knows the dictionary entries [0, num_*) that existed when it was trained.
    if (users != nullptr) {
      PLUMB_RETURN_IF_ERROR(store->LoadIds(store::IdSpace::kUser, manifest.num_users, users));
    }
    if (items != nullptr) {
      PLUMB_RETURN_IF_ERROR(store->LoadIds(store::IdSpace::kItem, manifest.num_items, items));
    }
    return Status::Ok();
  }();
  std::filesystem::remove_all(scratch, ec);
  return s;
}

}  // namespace plumb::tools
