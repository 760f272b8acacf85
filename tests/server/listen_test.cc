// One port, one server: RankingServer turns off gRPC's default SO_REUSEPORT, so a second
// server on a port that a running one holds fails to start, saying "address in use", while
// the first keeps its port. (With gRPC's default, both servers started and the kernel spread
// new connections between them.)
#include <gtest/gtest.h>

#include "plumb/v1/ranker.grpc.pb.h"
#include "server/ranking_server.h"

namespace plumb::server {
namespace {

TEST(RankingServerListen, ASecondServerOnAHeldPortFailsWithAddressInUse) {
  v1::Ranker::Service first_service, second_service;
  EndpointOptions options;
  options.listen = "127.0.0.1:0";
  std::unique_ptr<RankingServer> first;
  Status s = RankingServer::Start(options, &first_service, &first);
  ASSERT_TRUE(s.ok()) << s.ToString();
  ASSERT_GT(first->port(), 0);

  options.listen = "127.0.0.1:" + std::to_string(first->port());
  std::unique_ptr<RankingServer> second;
  s = RankingServer::Start(options, &second_service, &second);
  EXPECT_FALSE(s.ok()) << "a second server bound port " << first->port();
  EXPECT_EQ(s.code(), Status::Code::kFailedPrecondition) << s.ToString();
  EXPECT_NE(s.message().find("address in use"), std::string::npos) << s.message();
  EXPECT_EQ(second, nullptr);

  // Once the first server has stopped, the port can be taken again.
  const int port = first->port();
  first->Shutdown(std::chrono::milliseconds(0));
  first.reset();
  s = RankingServer::Start(options, &second_service, &second);
  ASSERT_TRUE(s.ok()) << s.ToString();
  EXPECT_EQ(second->port(), port);
}

}  // namespace
}  // namespace plumb::server
