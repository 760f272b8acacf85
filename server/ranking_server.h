// RankingServer: the gRPC endpoint of plumb-serve — the Ranker service plus the standard
// health-checking (grpc.health.v1) and server-reflection services, on one listening
// address, optionally with TLS.
//
// Health: both the overall status ("") and "plumb.v1.Ranker" start NOT_SERVING; the owner
// calls SetServing(true) once a snapshot is loaded. (gRPC registers "" as SERVING while it
// builds the server; Start() sets it to NOT_SERVING immediately after, before returning.)
//
// Threads: the synchronous server runs each call on one pool thread. The pool has one
// completion queue per core; threads are created as calls need them and then stay (idle
// ones wait on their queue), up to `max_threads` threads in all; a call arriving when every
// thread is busy is refused by gRPC with RESOURCE_EXHAUSTED ("Server Threadpool
// Exhausted"). plumb-serve sizes max_threads above its own AdmissionQueue (running +
// waiting calls + room for health checks), so that overload is met by that queue, which
// lets calls wait their turn, and gRPC's refusal remains a last resort; when it happens it
// is reported to on_transport_rejection.
#pragma once

#include <grpcpp/grpcpp.h>

#include <chrono>
#include <functional>
#include <memory>
#include <string>
#include <string_view>

#include "core/status.h"

namespace plumb::server {

struct EndpointOptions {
  // HOST:PORT to listen on; port 0 picks a free port (see port()).
  std::string listen = "127.0.0.1:7400";
  // PEM files. TLS is on when both cert and key are given; with a client CA as well,
  // clients must present a certificate signed by it.
  std::string tls_cert_file;
  std::string tls_key_file;
  std::string tls_client_ca_file;
  // Upper bound on server threads; 0 = 8 per core, at least 16.
  int max_threads = 0;
  // Offer server reflection so that generic tools can call plumb without the .proto files.
  bool reflection = true;
  // Called (from gRPC's threads) for each call gRPC refuses for want of a thread, with the
  // full method name. May be empty.
  std::function<void(std::string_view method)> on_transport_rejection;
};

class RankingServer {
 public:
  // Builds and starts the server with `ranker` (borrowed; must outlive the server).
  // InvalidArgument for half a TLS configuration; IoError when a PEM file cannot be read
  // or the address cannot be bound; FailedPrecondition ("address in use: ...") when another
  // socket holds the address (port reuse is off: no two servers share a port).
  static Status Start(const EndpointOptions& options, grpc::Service* ranker,
                      std::unique_ptr<RankingServer>* out);

  RankingServer(const RankingServer&) = delete;
  RankingServer& operator=(const RankingServer&) = delete;
  // Shuts down (without grace) if Shutdown() was not called.
  ~RankingServer();

  // The port actually bound.
  int port() const { return port_; }

  // Sets the health status of "" and "plumb.v1.Ranker". Thread-safe.
  void SetServing(bool serving);

  // Stops accepting calls, reports NOT_SERVING, lets in-flight calls finish for up to
  // `grace`, then cancels the rest. Idempotent; call from one thread.
  void Shutdown(std::chrono::milliseconds grace);

 private:
  RankingServer() = default;
  std::unique_ptr<grpc::Server> server_;
  int port_ = 0;
  bool shut_down_ = false;
};

}  // namespace plumb::server
