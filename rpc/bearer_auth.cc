#include "rpc/bearer_auth.h"

#include <sys/stat.h>

#include <cctype>
#include <cerrno>
#include <cstring>
#include <string_view>

#include "rpc/read_file.h"

namespace plumb::rpc {
namespace {

bool StartsWithNoCase(std::string_view s, std::string_view prefix) {
  if (s.size() < prefix.size()) return false;
  for (size_t i = 0; i < prefix.size(); ++i) {
    if (std::tolower(static_cast<unsigned char>(s[i])) !=
        std::tolower(static_cast<unsigned char>(prefix[i]))) {
      return false;
    }
  }
  return true;
}

// Compares without an early exit, so the time taken does not reveal how long a prefix of
// the expected token a guess got right. (Common practice for secret comparison.)
bool SameSecret(std::string_view given, std::string_view expected) {
  unsigned char diff = given.size() == expected.size() ? 0 : 1;
  for (size_t i = 0; i < expected.size(); ++i) {
    const unsigned char g = i < given.size() ? static_cast<unsigned char>(given[i]) : 0;
    diff |= static_cast<unsigned char>(g ^ static_cast<unsigned char>(expected[i]));
  }
  return diff == 0;
}

}  // namespace

Status BearerAuth::FromFile(const std::string& path, std::unique_ptr<BearerAuth>* out,
                            std::string* warning) {
  std::string content;
  PLUMB_RETURN_IF_ERROR(ReadWholeFile(path, "token", &content));
  size_t begin = 0, end = content.size();
  while (begin < end && std::isspace(static_cast<unsigned char>(content[begin]))) ++begin;
  while (end > begin && std::isspace(static_cast<unsigned char>(content[end - 1]))) --end;
  std::string token = content.substr(begin, end - begin);
  if (token.empty()) return Status::InvalidArgument("token file " + path + " is empty");
  for (unsigned char c : token) {
    // gRPC metadata values must be printable ASCII; a space would split the header.
    if (c <= 0x20 || c >= 0x7f) {
      return Status::InvalidArgument("token in " + path +
                                     " holds a space, control or non-ASCII character");
    }
  }
  if (warning != nullptr) {
    struct stat st;
    if (::stat(path.c_str(), &st) == 0 && (st.st_mode & (S_IRWXG | S_IRWXO)) != 0) {
      *warning = "token file " + path + " is accessible to group or others (chmod 600 it)";
    }
  }
  *out = std::make_unique<BearerAuth>(std::move(token));
  return Status::Ok();
}

grpc::Status BearerAuth::Check(const grpc::ServerContext& context) const {
  const auto& metadata = context.client_metadata();
  auto it = metadata.find("authorization");
  if (it == metadata.end()) {
    return grpc::Status(grpc::StatusCode::UNAUTHENTICATED,
                        "this endpoint requires 'authorization: Bearer <token>' metadata");
  }
  const std::string_view value(it->second.data(), it->second.size());
  // The scheme name is case-insensitive (RFC 7235 section 2.1; Bearer per RFC 6750).
  constexpr std::string_view kScheme = "bearer ";
  if (!StartsWithNoCase(value, kScheme)) {
    return grpc::Status(grpc::StatusCode::UNAUTHENTICATED,
                        "authorization metadata is not of the form 'Bearer <token>'");
  }
  std::string_view given = value.substr(kScheme.size());
  while (!given.empty() && given.front() == ' ') given.remove_prefix(1);
  if (!SameSecret(given, token_)) {
    return grpc::Status(grpc::StatusCode::UNAUTHENTICATED, "bearer token is not valid");
  }
  return grpc::Status::OK;
}

}  // namespace plumb::rpc
