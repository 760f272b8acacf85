// StatusEndpoint on a loopback port chosen by the system: /metrics is the Prometheus text
// exposition of the registered collectables (as prometheus-cpp's TextSerializer writes it),
// pages answer at their exact paths only, and every answer forbids scripts by policy.
#include "status/http_endpoint.h"

#include <arpa/inet.h>
#include <gtest/gtest.h>
#include <netinet/in.h>
#include <prometheus/counter.h>
#include <prometheus/registry.h>
#include <prometheus/text_serializer.h>
#include <sys/socket.h>
#include <unistd.h>

#include <string>

namespace plumb::status {
namespace {

// One HTTP/1.0 request; the whole answer (status line, headers, body).
std::string Request(int port, const std::string& method, const std::string& path) {
  const int fd = socket(AF_INET, SOCK_STREAM, 0);
  sockaddr_in addr{};
  addr.sin_family = AF_INET;
  addr.sin_port = htons(static_cast<uint16_t>(port));
  addr.sin_addr.s_addr = htonl(INADDR_LOOPBACK);
  std::string answer;
  if (connect(fd, reinterpret_cast<sockaddr*>(&addr), sizeof addr) == 0) {
    const std::string req = method + " " + path + " HTTP/1.0\r\nHost: localhost\r\n\r\n";
    if (write(fd, req.data(), req.size()) == static_cast<ssize_t>(req.size())) {
      char chunk[4096];
      ssize_t n;
      while ((n = read(fd, chunk, sizeof chunk)) > 0) answer.append(chunk, static_cast<size_t>(n));
    }
  }
  close(fd);
  return answer;
}

std::string Body(const std::string& answer) {
  const size_t end = answer.find("\r\n\r\n");
  return end == std::string::npos ? "" : answer.substr(end + 4);
}

TEST(StatusEndpoint, ServesMetricsAndPagesAtExactPaths) {
  auto registry = std::make_shared<prometheus::Registry>();
  prometheus::BuildCounter()
      .Name("plumb_test_things_total")
      .Help("things")
      .Register(*registry)
      .Add({{"kind", "a"}})
      .Increment(3);
  StatusEndpoint endpoint;
  endpoint.RegisterCollectable(registry);
  endpoint.RegisterPage("/", [] {
    return HttpReply{200, "text/html; charset=utf-8", "<p>hi</p>"};
  });
  endpoint.RegisterPage("/status.json", [] { return HttpReply{200, "application/json", "{}"}; });
  ASSERT_TRUE(endpoint.Start("127.0.0.1:0").ok());
  ASSERT_EQ(endpoint.ListeningPorts().size(), 1u);
  const int port = endpoint.ListeningPorts()[0];
  ASSERT_GT(port, 0);

  const std::string metrics = Request(port, "GET", "/metrics");
  EXPECT_EQ(metrics.rfind("HTTP/1.1 200", 0), 0u) << metrics;
  EXPECT_NE(metrics.find("Content-Type: text/plain; version=0.0.4"), std::string::npos);
  EXPECT_EQ(Body(metrics), prometheus::TextSerializer().Serialize(registry->Collect()));
  EXPECT_NE(Body(metrics).find("plumb_test_things_total{kind=\"a\"} 3"), std::string::npos);

  const std::string page = Request(port, "GET", "/");
  EXPECT_EQ(page.rfind("HTTP/1.1 200", 0), 0u);
  EXPECT_EQ(Body(page), "<p>hi</p>");
  EXPECT_NE(page.find("Content-Security-Policy: default-src 'none'"), std::string::npos);
  EXPECT_EQ(Body(Request(port, "GET", "/status.json")), "{}");
  // HEAD: the headers without the body.
  const std::string head = Request(port, "HEAD", "/");
  EXPECT_EQ(head.rfind("HTTP/1.1 200", 0), 0u);
  EXPECT_EQ(Body(head), "");
  // Anything else is 404 naming what there is; no prefix matching.
  for (const char* path : {"/nope", "/metrics/x", "/status.json/", "/index.html"}) {
    const std::string other = Request(port, "GET", path);
    EXPECT_EQ(other.rfind("HTTP/1.1 404", 0), 0u) << path << ": " << other;
    EXPECT_NE(Body(other).find("/metrics"), std::string::npos);
  }
}

TEST(StatusEndpoint, AnAddressInUseIsAnError) {
  StatusEndpoint first;
  ASSERT_TRUE(first.Start("127.0.0.1:0").ok());
  const std::string taken = "127.0.0.1:" + std::to_string(first.ListeningPorts()[0]);
  StatusEndpoint second;
  const Status s = second.Start(taken);
  EXPECT_FALSE(s.ok());
  EXPECT_NE(s.message().find(taken), std::string::npos) << s.message();
}

}  // namespace
}  // namespace plumb::status
