// MakeServerCredentials: the transport security of a plumb daemon's gRPC endpoint, from the
// PEM files its configuration names (plumb-serve's and plumb-train's alike).
#pragma once

#include <grpcpp/security/server_credentials.h>

#include <memory>
#include <string>

#include "core/status.h"

namespace plumb::rpc {

struct TlsFiles {
  std::string cert;       // PEM certificate chain
  std::string key;        // PEM private key
  std::string client_ca;  // optional: clients must present a certificate signed by this CA
};

// Insecure credentials when no file is given; TLS from the PEM files otherwise (with client
// certificates required and verified when client_ca is given). InvalidArgument for half a
// configuration (cert without key or the reverse, client_ca without both), IoError when a
// file cannot be read. Thread-safe.
Status MakeServerCredentials(const TlsFiles& files, std::shared_ptr<grpc::ServerCredentials>* out);

}  // namespace plumb::rpc
