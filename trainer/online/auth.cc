#include "trainer/online/auth.h"

#include <arpa/inet.h>
#include <grpcpp/security/server_credentials.h>
#include <sys/stat.h>

#include <cctype>
#include <cerrno>
#include <cstring>
#include <fstream>
#include <sstream>

namespace plumb::online {
namespace {

Status ReadFile(const std::string& path, std::string* out) {
  std::ifstream in(path, std::ios::binary);
  if (!in) return Status::IoError("cannot read " + path + ": " + std::strerror(errno));
  std::ostringstream buf;
  buf << in.rdbuf();
  if (in.bad()) return Status::IoError("error reading " + path);
  *out = buf.str();
  return Status::Ok();
}

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
  PLUMB_RETURN_IF_ERROR(ReadFile(path, &content));
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
                        "this plumb-train requires 'authorization: Bearer <token>' metadata");
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

grpc::Status Admit(const CallAdmission& admission, const grpc::ServerContext& context,
                   InflightCalls::Scope* scope) {
  *scope = EnterCall(admission.inflight);
  if (!scope->admitted()) {
    return grpc::Status(grpc::StatusCode::UNAVAILABLE,
                        "plumb-train is shutting down; nothing of this call was stored");
  }
  return admission.auth == nullptr ? grpc::Status::OK : admission.auth->Check(context);
}

bool IsLoopbackAddress(std::string_view address) {
  if (address.starts_with("unix:") || address.starts_with("unix-abstract:")) return true;
  if (address.starts_with("ipv4:")) address.remove_prefix(5);
  if (address.starts_with("ipv6:")) address.remove_prefix(5);
  std::string_view host;
  if (address.starts_with("[")) {
    const size_t close = address.find(']');
    if (close == std::string_view::npos) return false;
    host = address.substr(1, close - 1);
  } else {
    const size_t colon = address.rfind(':');
    host = colon == std::string_view::npos ? address : address.substr(0, colon);
  }
  if (host == "localhost") return true;
  const std::string h(host);
  in_addr v4;
  if (inet_pton(AF_INET, h.c_str(), &v4) == 1) {
    return (ntohl(v4.s_addr) >> 24) == 127;
  }
  in6_addr v6;
  if (inet_pton(AF_INET6, h.c_str(), &v6) == 1) {
    if (IN6_IS_ADDR_LOOPBACK(&v6)) return true;
    return IN6_IS_ADDR_V4MAPPED(&v6) && v6.s6_addr[12] == 127;
  }
  return false;
}

Status MakeServerCredentials(const std::string& tls_cert_path, const std::string& tls_key_path,
                             std::shared_ptr<grpc::ServerCredentials>* out) {
  if (tls_cert_path.empty() && tls_key_path.empty()) {
    *out = grpc::InsecureServerCredentials();
    return Status::Ok();
  }
  if (tls_cert_path.empty() || tls_key_path.empty()) {
    return Status::InvalidArgument("TLS needs both tls_cert and tls_key");
  }
  grpc::SslServerCredentialsOptions::PemKeyCertPair pair;
  PLUMB_RETURN_IF_ERROR(ReadFile(tls_cert_path, &pair.cert_chain));
  PLUMB_RETURN_IF_ERROR(ReadFile(tls_key_path, &pair.private_key));
  grpc::SslServerCredentialsOptions options;
  options.pem_key_cert_pairs.push_back(std::move(pair));
  *out = grpc::SslServerCredentials(options);
  return Status::Ok();
}

}  // namespace plumb::online
