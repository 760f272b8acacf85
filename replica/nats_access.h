// NatsAccess: how plumb reaches a NATS cluster (servers, token or credentials, TLS), the
// libnats connection options built from it, and connecting to and closing a JetStream
// context. Shared by the version publisher (plumb-train), the replica feed (plumb-serve
// --replica-of) and the JetStream event source (plumb-train).
#pragma once

#include <string>
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

// Splits "a,b,c" into its non-empty parts.
std::vector<std::string> SplitServers(const std::string& comma_separated);

// Builds connection options (reconnecting forever, every 250 ms) into *out, owned by the
// caller (natsOptions_Destroy). InvalidArgument naming the problem, after "<label>: ": no
// server, an unreadable or empty token file, credentials or TLS files that do not load, a
// TLS certificate without its key or the other way round.
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

// libnats' text for a status, with its last error when there is one.
std::string NatsErrorText(int nats_status);

}  // namespace plumb::replica
