// NatsAccess: how plumb reaches a NATS cluster (servers, token or credentials, TLS), and the
// libnats connection options built from it. Shared by the version publisher (plumb-train)
// and the replica feed (plumb-serve --replica-of).
#pragma once

#include <string>
#include <vector>

#include "core/status.h"

typedef struct __natsOptions natsOptions;

namespace plumb::replica {

struct NatsAccess {
  std::vector<std::string> servers;  // nats://HOST:PORT (tls://... for TLS); at least one
  std::string token_file;            // a file holding the server's token; "" = none
  std::string credentials_file;      // a NATS .creds file (JWT + seed); "" = none
  std::string tls_ca;                // CA to trust: connect with TLS
  std::string tls_cert, tls_key;     // a client certificate, when the server asks
};

// Splits "a,b,c" into its non-empty parts.
std::vector<std::string> SplitServers(const std::string& comma_separated);

// Builds connection options (reconnecting forever, every 250 ms) into *out, owned by the
// caller (natsOptions_Destroy). InvalidArgument naming the problem: no server, an
// unreadable or empty token file, credentials or TLS files that do not load.
Status MakeNatsOptions(const NatsAccess& access, const char* client_name, natsOptions** out);

// libnats' text for a status, with its last error when there is one.
std::string NatsErrorText(int nats_status);

}  // namespace plumb::replica
