// TrainServer: plumb-train's endpoint settles who may call before anything is opened, binds
// its port alone (no port reuse), and after Shutdown refuses calls.
#include "trainer/online/train_server.h"

#include <gtest/gtest.h>

#include "tests/online/ingest_server.h"
#include "tests/online/memory_event_log.h"

namespace plumb::online {
namespace {

using testing::MemoryEventLog;
using testing::Stream;
using testing::WireEvent;

TEST(TrainServer, ARemoteAddressNeedsATokenOrAnExplicitAllowance) {
  std::unique_ptr<TrainServer> server;
  TrainEndpointOptions o;
  o.listen = "0.0.0.0:0";
  const Status refused = TrainServer::Prepare(o, &server);
  EXPECT_EQ(refused.code(), Status::Code::kInvalidArgument);
  EXPECT_NE(refused.message().find("refusing to serve 0.0.0.0:0 without a bearer token"),
            std::string::npos)
      << refused.message();
  EXPECT_EQ(server, nullptr);
  o.allow_insecure_remote = true;
  EXPECT_TRUE(TrainServer::Prepare(o, &server).ok());
  o.listen = "127.0.0.1:0";
  o.allow_insecure_remote = false;
  o.tls_cert_file = "cert.pem";  // half a TLS configuration
  EXPECT_EQ(TrainServer::Prepare(o, &server).code(), Status::Code::kInvalidArgument);
  o.tls_cert_file.clear();
  o.token_file = "/nonexistent/token";
  EXPECT_EQ(TrainServer::Prepare(o, &server).code(), Status::Code::kIoError);
}

TEST(TrainServer, ServesAloneOnItsPortAndRefusesCallsAfterShutdown) {
  MemoryEventLog log;
  TrainMetrics metrics;
  GroupCommitter committer(&log, nullptr, GroupCommitOptions());
  TrainEndpointOptions o;
  o.listen = "127.0.0.1:0";
  std::unique_ptr<TrainServer> first;
  ASSERT_TRUE(TrainServer::Prepare(o, &first).ok());
  ASSERT_TRUE(first->Start(&committer, &metrics, IngestLimits(), nullptr, nullptr).ok());
  ASSERT_NE(first->port(), 0);
  EXPECT_FALSE(first->requires_token());

  // A second server on the same port does not share it.
  o.listen = testing::Name("127.0.0.1:", first->port());
  std::unique_ptr<TrainServer> second;
  ASSERT_TRUE(TrainServer::Prepare(o, &second).ok());
  const Status busy = second->Start(&committer, &metrics, IngestLimits(), nullptr, nullptr);
  EXPECT_EQ(busy.code(), Status::Code::kFailedPrecondition) << busy.ToString();
  EXPECT_NE(busy.message().find("address in use"), std::string::npos) << busy.message();

  auto stub = plumb::v1::EventIngest::NewStub(
      grpc::CreateChannel(o.listen, grpc::InsecureChannelCredentials()));
  const std::vector<plumb::v1::InteractionEvent> events = {WireEvent("m", "spade")};
  plumb::v1::PublishSummary summary;
  ASSERT_TRUE(Stream(stub.get(), events, &summary).ok());
  EXPECT_EQ(summary.accepted(), 1u);

  first->Shutdown(std::chrono::milliseconds(1000));
  EXPECT_FALSE(Stream(stub.get(), events, &summary).ok());
  EXPECT_EQ(log.size(), 1u);
  committer.Close();
}

}  // namespace
}  // namespace plumb::online
