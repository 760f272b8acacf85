// The plumb-serve binary as an operator runs it: from a store on disk with no trainer
// running, it starts, reports healthy, serves, exports metrics, follows a trainer that comes
// back, and stops cleanly on SIGTERM.
#include <arpa/inet.h>
#include <grpcpp/grpcpp.h>
#include <gtest/gtest.h>
#include <netinet/in.h>
#include <signal.h>
#include <sys/socket.h>
#include <sys/wait.h>
#include <unistd.h>

#include <cctype>
#include <fstream>
#include <iterator>
#include <thread>

#include "plumb/v1/ranker.grpc.pb.h"
#include "tests/common/child_process.h"
#include "tests/common/scratch_dir.h"
#include "tests/server/generic_rpc.h"
#include "tests/server/test_model.h"

#ifndef PLUMB_SERVE_BINARY
#error "PLUMB_SERVE_BINARY must name the plumb-serve executable"
#endif

namespace plumb::server {
namespace {

using testing::ScratchDir;

// A plumb-serve child process (tests/common/child_process.h) whose log is read as it grows.
class ServeProcess {
 public:
  explicit ServeProcess(const std::vector<std::string>& args)
      : child_(Argv(args), log_dir_.Sub("serve.log")), log_path_(log_dir_.Sub("serve.log")) {}

  // Reads the log until a line contains `marker`; returns the digits right after the marker
  // if there are any, else the whole line; empty after the timeout. (Plain string search:
  // std::regex trips a GCC 12 warning in the sanitizer build.)
  std::string WaitForLog(const std::string& marker, int timeout_ms = 20000) {
    const auto until = std::chrono::steady_clock::now() + std::chrono::milliseconds(timeout_ms);
    while (std::chrono::steady_clock::now() < until) {
      size_t eol;
      while ((eol = buffer_.find('\n')) != std::string::npos) {
        std::string line = buffer_.substr(0, eol);
        buffer_.erase(0, eol + 1);
        log_ += line + "\n";
        const size_t at = line.find(marker);
        if (at != std::string::npos) {
          size_t end = at + marker.size();
          while (end < line.size() && std::isdigit(static_cast<unsigned char>(line[end]))) ++end;
          return end > at + marker.size()
                     ? line.substr(at + marker.size(), end - at - marker.size())
                     : line;
        }
      }
      // What the child appended since the last read.
      std::ifstream in(log_path_, std::ios::binary);
      in.seekg(static_cast<std::streamoff>(read_), std::ios::beg);
      std::string more((std::istreambuf_iterator<char>(in)), std::istreambuf_iterator<char>());
      read_ += more.size();
      buffer_ += more;
      if (more.empty()) std::this_thread::sleep_for(std::chrono::milliseconds(20));
    }
    return {};
  }

  // Sends SIGTERM and returns the exit code (-1 if it did not exit within the timeout).
  int Terminate(int timeout_ms = 15000) {
    child_.Signal(SIGTERM);
    int status = 0;
    if (!child_.WaitFor(timeout_ms, &status)) return -1;
    return WIFEXITED(status) ? WEXITSTATUS(status) : -2;
  }

  const std::string& log() const { return log_; }

 private:
  static std::vector<std::string> Argv(const std::vector<std::string>& args) {
    std::vector<std::string> argv{PLUMB_SERVE_BINARY};
    argv.insert(argv.end(), args.begin(), args.end());
    return argv;
  }

  ::plumb::testing::ScratchDir log_dir_;
  ::plumb::testing::ChildProcess child_;
  const std::string log_path_;
  size_t read_ = 0;  // bytes of the log file already in buffer_
  std::string buffer_, log_;
};

std::string HttpGet(int port, const std::string& path) {
  const int fd = socket(AF_INET, SOCK_STREAM, 0);
  sockaddr_in addr{};
  addr.sin_family = AF_INET;
  addr.sin_port = htons(static_cast<uint16_t>(port));
  inet_pton(AF_INET, "127.0.0.1", &addr.sin_addr);
  std::string body;
  if (connect(fd, reinterpret_cast<sockaddr*>(&addr), sizeof(addr)) == 0) {
    const std::string req = "GET " + path + " HTTP/1.0\r\nHost: localhost\r\n\r\n";
    if (write(fd, req.data(), req.size()) == static_cast<ssize_t>(req.size())) {
      char chunk[4096];
      ssize_t n;
      while ((n = read(fd, chunk, sizeof(chunk))) > 0) body.append(chunk, static_cast<size_t>(n));
    }
  }
  close(fd);
  return body;
}

uint64_t CommitVersion(const std::string& db, uint64_t seed) {
  store::StoreOptions options;
  options.sync = false;
  std::unique_ptr<store::Store> primary;
  EXPECT_TRUE(store::Store::OpenPrimary(db, options, &primary).ok());
  uint64_t v = 0;
  Status s = testing::CommitModel(primary.get(), testing::RandomModel(20, 200, 8, 5, seed, false),
                                  true, &v);
  EXPECT_TRUE(s.ok()) << s.ToString();
  return v;  // the primary closes here: no trainer runs afterwards
}

v1::RecommendResponse RecommendOnce(const std::shared_ptr<grpc::Channel>& channel,
                                    grpc::Status* status) {
  auto stub = v1::Ranker::NewStub(channel);
  grpc::ClientContext context;
  context.set_deadline(std::chrono::system_clock::now() + std::chrono::seconds(10));
  v1::RecommendRequest request;
  request.set_user_id("member-3");
  request.set_count(5);
  v1::RecommendResponse response;
  *status = stub->Recommend(&context, request, &response);
  return response;
}

TEST(PlumbServeProcessTest, ServesFromDiskWithoutATrainerAndStopsOnSigterm) {
  ScratchDir dir;
  const uint64_t v1 = CommitVersion(dir.Sub("db"), 1);
  std::ofstream(dir.Sub("serve.toml")) << "catchup-interval = '50ms'\nlog-level = 'info'\n";
  ServeProcess serve({"--db", dir.Sub("db"), "--listen", "127.0.0.1:0", "--metrics", "127.0.0.1:0",
                      "--config", dir.Sub("serve.toml")});
  const std::string metrics_port = serve.WaitForLog("metrics on port ");
  const std::string port = serve.WaitForLog("listening on port ");
  ASSERT_FALSE(port.empty()) << serve.log();
  ASSERT_FALSE(metrics_port.empty()) << serve.log();

  auto channel = grpc::CreateChannel("127.0.0.1:" + port, grpc::InsecureChannelCredentials());
  EXPECT_EQ(testing::HealthCheck(channel, ""), 1);  // SERVING
  EXPECT_EQ(testing::HealthCheck(channel, "plumb.v1.Ranker"), 1);
  grpc::Status status;
  v1::RecommendResponse response = RecommendOnce(channel, &status);
  ASSERT_TRUE(status.ok()) << status.error_message();
  EXPECT_EQ(response.model_version(), v1);
  EXPECT_EQ(response.items_size(), 5);

  const std::string metrics = HttpGet(std::stoi(metrics_port), "/metrics");
  EXPECT_NE(metrics.find("plumb_model_version " + std::to_string(v1)), std::string::npos)
      << metrics;
  EXPECT_NE(metrics.find("plumb_requests_total{"), std::string::npos);
  EXPECT_NE(metrics.find("plumb_request_duration_seconds_bucket"), std::string::npos);
  EXPECT_NE(metrics.find("plumb_snapshot_swaps_total 1"), std::string::npos);

  // A trainer comes back and publishes: the running server follows.
  const uint64_t v2 = CommitVersion(dir.Sub("db"), 2);
  bool followed = false;
  for (int i = 0; i < 200 && !followed; ++i) {
    response = RecommendOnce(channel, &status);
    followed = status.ok() && response.model_version() == v2;
    if (!followed) std::this_thread::sleep_for(std::chrono::milliseconds(50));
  }
  EXPECT_TRUE(followed);

  EXPECT_EQ(serve.Terminate(), 0) << serve.log();
  EXPECT_NE(serve.WaitForLog("received SIGTERM", 1000), "") << serve.log();
}

TEST(PlumbServeProcessTest, WithoutAVersionItIsUnavailableUntilOneIsPublished) {
  ScratchDir dir;
  {
    std::unique_ptr<store::Store> primary;
    ASSERT_TRUE(store::Store::OpenPrimary(dir.Sub("db"), store::StoreOptions(), &primary).ok());
  }
  ServeProcess serve({"--db", dir.Sub("db"), "--listen", "127.0.0.1:0", "--metrics", "",
                      "--catchup-interval", "50ms"});
  const std::string port = serve.WaitForLog("listening on port ");
  ASSERT_FALSE(port.empty()) << serve.log();
  auto channel = grpc::CreateChannel("127.0.0.1:" + port, grpc::InsecureChannelCredentials());
  EXPECT_EQ(testing::HealthCheck(channel, ""), 2);  // NOT_SERVING
  grpc::Status status;
  RecommendOnce(channel, &status);
  EXPECT_EQ(status.error_code(), grpc::StatusCode::UNAVAILABLE);

  const uint64_t v = CommitVersion(dir.Sub("db"), 3);
  int health = 0;
  for (int i = 0; i < 200 && health != 1; ++i) {
    health = testing::HealthCheck(channel, "");
    if (health != 1) std::this_thread::sleep_for(std::chrono::milliseconds(50));
  }
  EXPECT_EQ(health, 1);
  v1::RecommendResponse response = RecommendOnce(channel, &status);
  EXPECT_TRUE(status.ok());
  EXPECT_EQ(response.model_version(), v);
  EXPECT_EQ(serve.Terminate(), 0) << serve.log();
}

TEST(PlumbServeProcessTest, RefusesToStartOnAMissingStore) {
  ScratchDir dir;
  ServeProcess serve({"--db", dir.Sub("nothing-here"), "--listen", "127.0.0.1:0", "--metrics", ""});
  EXPECT_NE(serve.WaitForLog("cannot open store"), "") << serve.log();
  EXPECT_EQ(serve.Terminate(), 1);
}

}  // namespace
}  // namespace plumb::server
