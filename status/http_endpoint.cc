#include "status/http_endpoint.h"

#include <CivetServer.h>
#include <prometheus/text_serializer.h>

#include <cstring>

namespace plumb::status {

class StatusEndpoint::Handler final : public CivetHandler {
 public:
  explicit Handler(const StatusEndpoint* owner) : owner_(owner) {}
  bool handleGet(CivetServer*, struct mg_connection* conn) override { return Serve(conn, true); }
  bool handleHead(CivetServer*, struct mg_connection* conn) override { return Serve(conn, false); }

 private:
  bool Serve(struct mg_connection* conn, bool with_body) {
    const struct mg_request_info* info = mg_get_request_info(conn);
    const std::string path = info && info->local_uri ? info->local_uri : "";
    HttpReply reply;
    if (path == "/metrics") {
      reply.content_type = "text/plain; version=0.0.4; charset=utf-8";
      reply.body = owner_->RenderMetrics();
    } else if (auto it = owner_->pages_.find(path); it != owner_->pages_.end()) {
      reply = it->second();
    } else {
      reply.code = 404;
      reply.content_type = "text/plain; charset=utf-8";
      reply.body = "not found: this address serves /metrics";
      for (const auto& [page, render] : owner_->pages_) reply.body += ", " + page;
      reply.body += "\n";
    }
    const char* reason = reply.code == 200 ? "OK" : reply.code == 404 ? "Not Found" : "Error";
    mg_printf(conn,
              "HTTP/1.1 %d %s\r\nContent-Type: %s\r\nContent-Length: %zu\r\n"
              "Cache-Control: no-store\r\nX-Content-Type-Options: nosniff\r\n"
              "Content-Security-Policy: default-src 'none'; style-src 'unsafe-inline'; "
              "img-src data:\r\n\r\n",
              reply.code, reason, reply.content_type.c_str(), reply.body.size());
    if (with_body) mg_write(conn, reply.body.data(), reply.body.size());
    return true;
  }
  const StatusEndpoint* owner_;
};

StatusEndpoint::StatusEndpoint() = default;

StatusEndpoint::~StatusEndpoint() {
  server_.reset();  // stops the threads before the handler goes
}

void StatusEndpoint::RegisterCollectable(std::weak_ptr<prometheus::Collectable> collectable) {
  collectables_.push_back(std::move(collectable));
}

void StatusEndpoint::RegisterPage(const std::string& path, std::function<HttpReply()> render) {
  pages_[path] = std::move(render);
}

Status StatusEndpoint::Start(const std::string& address, int threads) {
  handler_ = std::make_unique<Handler>(this);
  const std::vector<std::string> options = {"listening_ports", address, "num_threads",
                                            std::to_string(threads > 0 ? threads : 1)};
  try {
    server_ = std::make_unique<CivetServer>(options);
  } catch (const std::exception& e) {
    return Status::IoError("cannot listen on " + address + ": " + e.what());
  }
  server_->addHandler("/", handler_.get());
  return Status::Ok();
}

std::vector<int> StatusEndpoint::ListeningPorts() const {
  return server_ ? server_->getListeningPorts() : std::vector<int>{};
}

std::string StatusEndpoint::RenderMetrics() const {
  std::vector<prometheus::MetricFamily> families;
  for (const auto& weak : collectables_) {
    if (auto collectable = weak.lock()) {
      std::vector<prometheus::MetricFamily> more = collectable->Collect();
      families.insert(families.end(), std::make_move_iterator(more.begin()),
                      std::make_move_iterator(more.end()));
    }
  }
  return prometheus::TextSerializer().Serialize(families);
}

}  // namespace plumb::status
