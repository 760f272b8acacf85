// TrainServer: the gRPC endpoint of plumb-train — the EventIngest and ModelControl services
// (owned), the standard health-checking and server-reflection services, on one listening
// address, optionally with TLS, with who may call settled before anything else is opened.
//
// Two steps, because the endpoint's checks must come before the store is opened (a refusal
// then changes nothing on disk) while the services need the store and the loop:
//   Prepare  reads the bearer token file (rpc/bearer_auth.h) and the TLS files, and applies
//            the loopback rule: without a token the endpoint listens only on a loopback
//            address unless allow_insecure_remote is set.
//   Start    builds the services over the committer, the store and the loop, and listens.
//            Port reuse is off: a second process on the same port fails to start instead of
//            taking a share of the calls against another store.
// Shutdown stops accepting, lets calls in flight finish for a grace period, then cancels the
// rest.
//
// Thread safety: Prepare, Start and Shutdown from one thread; the services run on gRPC's.
#pragma once

#include <grpcpp/grpcpp.h>

#include <chrono>
#include <cstdint>
#include <memory>
#include <string>

#include "core/status.h"
#include "rpc/bearer_auth.h"
#include "store/store.h"
#include "trainer/online/control_service.h"
#include "trainer/online/group_commit.h"
#include "trainer/online/inflight_calls.h"
#include "trainer/online/ingest_service.h"
#include "trainer/online/online_loop.h"
#include "trainer/online/train_metrics.h"

namespace plumb::online {

struct TrainEndpointOptions {
  std::string listen = "127.0.0.1:7601";  // HOST:PORT; port 0 picks a free one (see port())
  std::string token_file;                 // empty: no token required
  bool allow_insecure_remote = false;     // serve a non-loopback address without a token
  std::string tls_cert_file;              // PEM; TLS when both cert and key are given
  std::string tls_key_file;
  int max_receive_message_bytes = 16 << 20;
};

class TrainServer {
 public:
  // Settles who may call (see the file comment). InvalidArgument for a bad token file, half
  // a TLS configuration, or a non-loopback address without a token (the message says how to
  // allow it); IoError when a file cannot be read. Warns (log) about a token file readable
  // by others, a remote address without a token when allowed, and a token sent in clear text.
  static Status Prepare(const TrainEndpointOptions& options, std::unique_ptr<TrainServer>* out);

  TrainServer(const TrainServer&) = delete;
  TrainServer& operator=(const TrainServer&) = delete;
  // Shuts down without grace if Shutdown() was not called.
  ~TrainServer();

  // Builds the services (borrowing everything passed; all must outlive the server) and
  // starts listening. FailedPrecondition "address in use: ..." when another socket holds the
  // address; IoError when it cannot be bound otherwise. Call once, after Prepare.
  Status Start(GroupCommitter* committer, TrainMetrics* metrics, const IngestLimits& limits,
               store::Store* store, OnlineLoop* loop);

  int port() const { return port_; }
  bool requires_token() const { return auth_ != nullptr; }
  bool uses_tls() const { return tls_; }

  // Reports NOT_SERVING, refuses new calls (UNAVAILABLE), lets running ones finish for up to
  // `grace`, then cancels the rest and closes the connections; returns when no handler runs.
  // Handlers waiting for the committer still get their answer as long as it is open, so
  // close it after this. Idempotent.
  void Shutdown(std::chrono::milliseconds grace);

 private:
  TrainServer() = default;

  TrainEndpointOptions options_;
  std::unique_ptr<rpc::BearerAuth> auth_;
  std::shared_ptr<grpc::ServerCredentials> credentials_;
  bool tls_ = false;
  InflightCalls inflight_;
  std::unique_ptr<IngestService> ingest_;
  std::unique_ptr<ControlService> control_;
  std::unique_ptr<grpc::Server> server_;
  int port_ = 0;
  bool shut_down_ = false;
};

}  // namespace plumb::online
