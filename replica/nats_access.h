// NatsAccess: how plumb reaches a NATS cluster (servers, token or credentials, TLS), the
// libnats connection options built from it, and connecting to and closing a JetStream
// context. Shared by the version publisher (plumb-train), the replica feed (plumb-serve
// --replica-of) and the JetStream event source (plumb-train).
#pragma once

#include <string>
#include <string_view>
#include <vector>

#include "core/status.h"

typedef struct __natsOptions natsOptions;
typedef struct __natsConnection natsConnection;
typedef struct __jsCtx jsCtx;
typedef struct jsOptions jsOptions;

namespace plumb::replica {

struct NatsAccess {
  std::vector<std::string> servers;  // nats://HOST:PORT (tls://... for TLS); at least one
  std::string token_file;            // a file holding the server's token; "" = none
  std::string credentials_file;      // a NATS .creds file (JWT + seed); "" = none
  std::string tls_ca;                // CA to trust: connect with TLS
  std::string tls_cert, tls_key;     // a client certificate, when the server asks
};

// A NATS connection as a daemon's configuration holds it, one key (and flag) a field:
// plumb-serve's replica_* keys, plumb-train's jetstream_* keys.
struct NatsSettings {
  std::string servers;  // comma-separated nats://HOST:PORT (tls://... for TLS); "" = none
  std::string token_file, credentials_file;  // as in NatsAccess
  std::string tls_ca, tls_cert, tls_key;     // as in NatsAccess
};

// The NatsAccess that `settings` describe: the servers split by SplitServers, the rest as is.
NatsAccess ToNatsAccess(const NatsSettings& settings);

// Splits "a,b,c" into its non-empty parts.
std::vector<std::string> SplitServers(const std::string& comma_separated);

// Builds connection options into *out, owned by the caller (natsOptions_Destroy). A lost
// connection is reconnected forever, every 250-350 ms; why a reconnect fails is logged as a
// warning naming `label` (or `client_name` when label is "NATS"), once per distinct reason
// and episode (ExplainNatsFailure's wording). InvalidArgument naming the problem, after
// "<label>: ": no server, an unreadable or empty token file, unreadable credentials or TLS
// files or ones that do not load, a TLS certificate without its key or the other way round.
Status MakeNatsOptions(const NatsAccess& access, const char* client_name, natsOptions** out,
                       const char* label = "NATS");

// Connects with `options` into *nc and makes a JetStream context into *js (js_options null:
// libnats' defaults). Returns libnats' status; on failure *failed_step is "cannot connect"
// or "no JetStream context", and what was made stays for CloseNats.
int ConnectJetStream(natsOptions* options, jsOptions* js_options, natsConnection** nc, jsCtx** js,
                     const char** failed_step);

// Destroys *js, then closes and destroys *nc, where set; both are null afterwards.
void CloseNats(natsConnection** nc, jsCtx** js);

// The URL nc is connected to ("" when it is not).
std::string ConnectedUrl(natsConnection* nc);

// libnats' text for a status, with the calling thread's last libnats error when there is
// one, explained by ExplainNatsFailure.
std::string NatsErrorText(int nats_status);

// libnats' text for a status and its error text (last_error, may be empty), preceded by what
// an operator should check where the failure has a known cause: a TLS handshake that failed
// (the server's certificate not signed by a trusted CA, not naming the host, expired), TLS
// wanted by one side only, or a server that closed the connection while connecting (what a
// NATS server verifying TLS clients does to a client without an accepted certificate).
std::string ExplainNatsFailure(int nats_status, std::string_view last_error);

}  // namespace plumb::replica
