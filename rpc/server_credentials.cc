#include "rpc/server_credentials.h"

#include "rpc/read_file.h"

namespace plumb::rpc {

Status MakeServerCredentials(const TlsFiles& files, std::shared_ptr<grpc::ServerCredentials>* out) {
  const bool cert = !files.cert.empty(), key = !files.key.empty();
  if (cert != key) {
    return Status::InvalidArgument("TLS needs both tls_cert and tls_key (only one was given)");
  }
  if (!cert) {
    if (!files.client_ca.empty()) {
      return Status::InvalidArgument("tls_client_ca needs tls_cert and tls_key");
    }
    *out = grpc::InsecureServerCredentials();
    return Status::Ok();
  }
  grpc::SslServerCredentialsOptions ssl;
  grpc::SslServerCredentialsOptions::PemKeyCertPair pair;
  PLUMB_RETURN_IF_ERROR(ReadWholeFile(files.key, "TLS key", &pair.private_key));
  PLUMB_RETURN_IF_ERROR(ReadWholeFile(files.cert, "TLS certificate", &pair.cert_chain));
  ssl.pem_key_cert_pairs.push_back(std::move(pair));
  if (!files.client_ca.empty()) {
    PLUMB_RETURN_IF_ERROR(ReadWholeFile(files.client_ca, "TLS client CA", &ssl.pem_root_certs));
    ssl.client_certificate_request = GRPC_SSL_REQUEST_AND_REQUIRE_CLIENT_CERTIFICATE_AND_VERIFY;
  }
  *out = grpc::SslServerCredentials(ssl);
  return Status::Ok();
}

}  // namespace plumb::rpc
