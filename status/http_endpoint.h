// StatusEndpoint: the HTTP side of a daemon's --metrics address. It serves the Prometheus
// exposition of registered collectables at /metrics (as prometheus::Exposer did) and any
// number of pages at exact paths (the status page at /, its JSON at /status.json).
//
// Built on civetweb (Debian's libcivetweb, which prometheus-cpp's own exposer uses), so that
// the metrics and the pages share one port. Pages are rendered on civetweb's worker
// threads when requested; nothing here runs on the gRPC request path.
//
// Thread safety: Register* before Start(); after that the object is read-only until
// destruction, which stops the HTTP threads (waiting for requests in progress).
#pragma once

#include <prometheus/collectable.h>

#include <functional>
#include <map>
#include <memory>
#include <string>
#include <vector>

#include "core/status.h"

class CivetServer;

namespace plumb::status {

// What a page handler returns.
struct HttpReply {
  int code = 200;
  std::string content_type = "text/html; charset=utf-8";
  std::string body;
};

class StatusEndpoint {
 public:
  StatusEndpoint();
  ~StatusEndpoint();
  StatusEndpoint(const StatusEndpoint&) = delete;
  StatusEndpoint& operator=(const StatusEndpoint&) = delete;

  // Adds a source of /metrics. Borrowed through the weak pointer; an expired one is skipped.
  void RegisterCollectable(std::weak_ptr<prometheus::Collectable> collectable);
  // Serves `render()` at exactly `path` (GET and HEAD). The function is called on an HTTP
  // thread, concurrently with itself; it must be thread-safe.
  void RegisterPage(const std::string& path, std::function<HttpReply()> render);

  // Listens on `address` ("host:port" as civetweb's listening_ports takes it; port 0: a
  // free port, see ListeningPorts()) with `threads` worker threads. IoError naming the
  // address when it cannot listen.
  Status Start(const std::string& address, int threads = 4);

  std::vector<int> ListeningPorts() const;

  // The /metrics body (Prometheus text exposition 0.0.4) of the registered collectables.
  std::string RenderMetrics() const;

 private:
  class Handler;
  std::vector<std::weak_ptr<prometheus::Collectable>> collectables_;
  std::map<std::string, std::function<HttpReply()>> pages_;
  std::unique_ptr<Handler> handler_;
  std::unique_ptr<CivetServer> server_;
};

}  // namespace plumb::status
