// ProbeListenAddress against sockets this test binds itself.
#include "rpc/listen_probe.h"

#include <arpa/inet.h>
#include <gtest/gtest.h>
#include <netinet/in.h>
#include <sys/socket.h>
#include <unistd.h>

#include <string>

namespace plumb::rpc {
namespace {

// A loopback TCP socket bound to a free port (listening when `listen` is true).
class HeldPort {
 public:
  explicit HeldPort(bool listen) {
    fd_ = socket(AF_INET, SOCK_STREAM, 0);
    sockaddr_in addr{};
    addr.sin_family = AF_INET;
    addr.sin_addr.s_addr = htonl(INADDR_LOOPBACK);
    EXPECT_EQ(bind(fd_, reinterpret_cast<sockaddr*>(&addr), sizeof addr), 0);
    if (listen) {
      EXPECT_EQ(::listen(fd_, 4), 0);
    }
    socklen_t len = sizeof addr;
    getsockname(fd_, reinterpret_cast<sockaddr*>(&addr), &len);
    port_ = ntohs(addr.sin_port);
  }
  ~HeldPort() { Release(); }
  void Release() {
    if (fd_ >= 0) close(fd_);
    fd_ = -1;
  }
  std::string address() const { return "127.0.0.1:" + std::to_string(port_); }
  int port() const { return port_; }

 private:
  int fd_ = -1;
  int port_ = 0;
};

TEST(ProbeListenAddress, AHeldPortIsReportedAsAddressInUse) {
  HeldPort held(/*listen=*/true);
  Status s = ProbeListenAddress(held.address(), "metrics");
  EXPECT_EQ(s.code(), Status::Code::kFailedPrecondition) << s.ToString();
  EXPECT_NE(s.message().find("address in use"), std::string::npos) << s.message();
  EXPECT_NE(s.message().find("metrics address " + held.address()), std::string::npos)
      << s.message();
  // A bare port means every interface, which includes the held loopback port.
  EXPECT_EQ(ProbeListenAddress(std::to_string(held.port()), "gRPC").code(),
            Status::Code::kFailedPrecondition);

  held.Release();
  EXPECT_TRUE(ProbeListenAddress("127.0.0.1:" + std::to_string(held.port()), "gRPC").ok());
}

TEST(ProbeListenAddress, PortZeroAndNonTcpAddressesAreLeftToTheServer) {
  EXPECT_TRUE(ProbeListenAddress("127.0.0.1:0", "gRPC").ok());
  EXPECT_TRUE(ProbeListenAddress("unix:/tmp/plumb.sock", "gRPC").ok());
  EXPECT_TRUE(ProbeListenAddress("[::1]:0", "gRPC").ok());
}

TEST(ProbeListenAddress, APortThatIsNotANumberIsInvalidArgument) {
  Status s = ProbeListenAddress("127.0.0.1:http", "gRPC");
  EXPECT_EQ(s.code(), Status::Code::kInvalidArgument) << s.ToString();
  EXPECT_NE(s.message().find("'http' is not a number"), std::string::npos) << s.message();
}

}  // namespace
}  // namespace plumb::rpc
