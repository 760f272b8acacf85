#include "trainer/online/auth.h"

#include <grpcpp/security/server_credentials.h>

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

}  // namespace

grpc::Status Admit(const CallAdmission& admission, const grpc::ServerContext& context,
                   InflightCalls::Scope* scope) {
  *scope = EnterCall(admission.inflight);
  if (!scope->admitted()) {
    return grpc::Status(grpc::StatusCode::UNAVAILABLE,
                        "plumb-train is shutting down; nothing of this call was stored");
  }
  return admission.auth == nullptr ? grpc::Status::OK : admission.auth->Check(context);
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
