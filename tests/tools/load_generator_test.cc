// LoadGenerator and EventPublisher against an in-process Ranker / EventIngest that count
// what they are asked, and the JSON report built from the result.
#include "tools/load_generator.h"

#include <grpcpp/grpcpp.h>
#include <grpcpp/health_check_service_interface.h>
#include <gtest/gtest.h>

#include <map>
#include <mutex>

#include "plumb/v1/ingest.grpc.pb.h"
#include "plumb/v1/ranker.grpc.pb.h"
#include "tools/client_channel.h"
#include "tools/event_publisher.h"
#include "tools/load_report.h"

namespace plumb::tools {
namespace {

// Answers every user with `count` items except "ghost" (NOT_FOUND); counts asks per user.
class CountingRanker final : public plumb::v1::Ranker::Service {
 public:
  grpc::Status Recommend(grpc::ServerContext*, const plumb::v1::RecommendRequest* request,
                         plumb::v1::RecommendResponse* response) override {
    {
      std::lock_guard<std::mutex> lock(mu);
      ++asked[request->user_id()];
      last_count = request->count();
      last_exclude_seen = !request->include_seen();
    }
    if (request->user_id() == "ghost") {
      return grpc::Status(grpc::StatusCode::NOT_FOUND, "unknown user 'ghost'");
    }
    for (uint32_t k = 0; k < request->count(); ++k) response->add_items()->set_item_id("t");
    response->set_model_version(3);
    return grpc::Status::OK;
  }
  grpc::Status SimilarItems(grpc::ServerContext*, const plumb::v1::SimilarItemsRequest* request,
                            plumb::v1::SimilarItemsResponse*) override {
    std::lock_guard<std::mutex> lock(mu);
    ++asked[request->item_id()];
    return grpc::Status::OK;
  }

  std::mutex mu;
  std::map<std::string, uint64_t> asked;
  uint32_t last_count = 0;
  bool last_exclude_seen = false;
};

class CountingIngest final : public plumb::v1::EventIngest::Service {
 public:
  grpc::Status PublishBatch(grpc::ServerContext* context,
                            const plumb::v1::PublishBatchRequest* request,
                            plumb::v1::PublishSummary* summary) override {
    std::lock_guard<std::mutex> lock(mu);
    const auto auth = context->client_metadata().find("authorization");
    if (auth == context->client_metadata().end() || auth->second != "Bearer tok") {
      return grpc::Status(grpc::StatusCode::UNAUTHENTICATED, "no token");
    }
    events += static_cast<uint64_t>(request->events_size());
    for (const auto& e : request->events()) {
      if (!e.event_id().empty()) ids.insert(e.event_id());
    }
    summary->set_accepted(static_cast<uint64_t>(request->events_size()));
    return grpc::Status::OK;
  }
  std::mutex mu;
  uint64_t events = 0;
  std::set<std::string> ids;
};

class LoadGeneratorTest : public ::testing::Test {
 protected:
  void SetUp() override {
    grpc::EnableDefaultHealthCheckService(true);
    grpc::ServerBuilder builder;
    int port = 0;
    builder.AddListeningPort("127.0.0.1:0", grpc::InsecureServerCredentials(), &port);
    builder.RegisterService(&ranker_);
    builder.RegisterService(&ingest_);
    server_ = builder.BuildAndStart();
    ASSERT_NE(port, 0);
    target_ = "127.0.0.1:" + std::to_string(port);
    std::shared_ptr<grpc::Channel> channel;
    ASSERT_TRUE(MakeChannel({target_, "", ""}, &channel).ok());
    // As plumb-load does before a run. Without it, open-loop calls started from the
    // dispatcher thread while this in-process channel was still connecting were seen to
    // stall until their deadline in about 1 run in 10 (gRPC 1.51); never with the
    // connection established first.
    ASSERT_TRUE(
        channel->WaitForConnected(std::chrono::system_clock::now() + std::chrono::seconds(10)));
    channels_.push_back(channel);
  }
  void TearDown() override { server_->Shutdown(); }

  CountingRanker ranker_;
  CountingIngest ingest_;
  std::unique_ptr<grpc::Server> server_;
  std::string target_;
  std::vector<std::shared_ptr<grpc::Channel>> channels_;
};

TEST_F(LoadGeneratorTest, ClosedLoopCountsOkCallsAndErrorsByCode) {
  // Uniform draw over two users, one of which the server does not know.
  const std::vector<std::string> users = {"m1", "ghost"};
  LoadOptions o;
  o.concurrency = 4;
  o.threads = 2;
  o.warmup_seconds = 0.1;
  o.duration_seconds = 0.5;
  o.zipf_s = 0;
  o.count = 7;
  LoadGenerator generator(channels_, &users, o);  // seen items left out by default
  LoadResult result;
  ASSERT_TRUE(generator.Run(&result).ok());
  const CallTally& t = result.calls;
  ASSERT_GT(t.ok, 10u);
  EXPECT_EQ(t.latency.count, t.ok);  // latencies of OK calls only
  ASSERT_EQ(t.errors_by_code.size(), 1u);
  EXPECT_EQ(t.errors_by_code.at("NOT_FOUND"), t.failed);
  EXPECT_EQ(t.first_error.at("NOT_FOUND"), "unknown user 'ghost'");
  // Half the draws are the ghost: binomial, 6 standard deviations.
  const double n = static_cast<double>(t.ok + t.failed);
  EXPECT_NEAR(static_cast<double>(t.failed), n / 2, 6 * std::sqrt(n / 4));
  // Warm-up calls reached the server but are not counted.
  uint64_t asked = 0;
  for (const auto& [user, k] : ranker_.asked) asked += k;
  EXPECT_EQ(asked, result.started);
  EXPECT_GT(result.started, t.ok + t.failed);
  EXPECT_EQ(ranker_.last_count, 7u);
  EXPECT_TRUE(ranker_.last_exclude_seen);
  EXPECT_LE(t.latency.p50_ns, t.latency.p99_ns);
  EXPECT_LE(t.latency.p99_ns, t.latency.max_ns);
  EXPECT_GT(t.latency.min_ns, 0);
}

// The users the server is asked about follow the Zipf weights: with s = 1 over 3 users the
// shares are 6/11, 3/11 and 2/11 (1, 1/2, 1/3 over H_3 = 11/6).
TEST_F(LoadGeneratorTest, OpenLoopDrawsUsersWithZipfWeights) {
  const std::vector<std::string> users = {"a", "b", "c"};
  LoadOptions o;
  o.rate = 2000;
  o.threads = 2;
  o.warmup_seconds = 0;
  o.duration_seconds = 0.6;
  o.zipf_s = 1.0;
  LoadGenerator generator(channels_, &users, o);
  LoadResult result;
  ASSERT_TRUE(generator.Run(&result).ok());
  // Open loop: the number of calls is the schedule's, 2000/s * 0.6 s.
  EXPECT_EQ(result.started, 1200u);
  EXPECT_EQ(result.calls.ok, 1200u) << ::testing::PrintToString(result.calls.errors_by_code)
                                    << ::testing::PrintToString(result.calls.first_error);
  std::vector<double> shares;
  for (const auto& [user, k] : ranker_.asked) shares.push_back(static_cast<double>(k) / 1200.0);
  std::sort(shares.rbegin(), shares.rend());
  ASSERT_EQ(shares.size(), 3u);
  // Binomial standard deviation at n = 1200 is at most 0.0144; 5 of them.
  EXPECT_NEAR(shares[0], 6.0 / 11, 0.072);
  EXPECT_NEAR(shares[1], 3.0 / 11, 0.072);
  EXPECT_NEAR(shares[2], 2.0 / 11, 0.072);
}

TEST_F(LoadGeneratorTest, HealthAndSimilarCalls) {
  LoadOptions o;
  o.rpc = LoadRpc::kHealth;
  o.concurrency = 2;
  o.warmup_seconds = 0;
  o.duration_seconds = 0.2;
  LoadGenerator health(channels_, nullptr, o);
  LoadResult result;
  ASSERT_TRUE(health.Run(&result).ok());
  EXPECT_GT(result.calls.ok, 0u);
  EXPECT_EQ(result.calls.failed, 0u);

  // A service the health checker does not know is NOT_FOUND, counted as an error.
  o.health_service = "no.such.Service";
  LoadGenerator unknown(channels_, nullptr, o);
  ASSERT_TRUE(unknown.Run(&result).ok());
  EXPECT_EQ(result.calls.ok, 0u);
  EXPECT_GT(result.calls.errors_by_code["NOT_FOUND"], 0u);

  const std::vector<std::string> items = {"t1"};
  o.rpc = LoadRpc::kSimilar;
  LoadGenerator similar(channels_, &items, o);
  ASSERT_TRUE(similar.Run(&result).ok());
  EXPECT_GT(result.calls.ok, 0u);
  EXPECT_EQ(ranker_.asked["t1"], result.started);
}

TEST_F(LoadGeneratorTest, RefusesRecommendWithoutUsers) {
  LoadOptions o;
  LoadGenerator generator(channels_, nullptr, o);
  LoadResult result;
  EXPECT_EQ(generator.Run(&result).code(), Status::Code::kInvalidArgument);
}

TEST_F(LoadGeneratorTest, PublisherSendsTheScheduledEventsWithTheToken) {
  std::shared_ptr<grpc::Channel> channel = channels_[0];
  const std::vector<std::string> users = {"m1", "m2"}, items = {"t1", "t2", "t3"};
  PublishOptions o;
  o.events_per_second = 1000;
  o.batch = 50;  // 20 batches per second
  o.bearer_token = "tok";
  o.event_ids = true;
  EventPublisher publisher(channel, &users, &items, o);
  PublishResult result;
  const auto begin = LoadClock::now();
  ASSERT_TRUE(publisher.Run(begin, begin + std::chrono::milliseconds(500), &result).ok());
  EXPECT_EQ(result.batches, 10u);  // slots at 0, 50, ..., 450 ms
  EXPECT_EQ(result.acknowledged, 500u);
  EXPECT_EQ(ingest_.events, 500u);
  EXPECT_EQ(ingest_.ids.size(), 500u);  // every event id distinct
  EXPECT_EQ(result.calls.failed, 0u);

  o.bearer_token = "wrong";
  EventPublisher refused(channel, &users, &items, o);
  ASSERT_TRUE(
      refused.Run(LoadClock::now(), LoadClock::now() + std::chrono::milliseconds(100), &result)
          .ok());
  EXPECT_EQ(result.acknowledged, 0u);
  EXPECT_EQ(result.calls.errors_by_code["UNAUTHENTICATED"], result.batches);
}

TEST(LoadReportTest, JsonStringEscapes) {
  EXPECT_EQ(JsonString("a\"b\\c\n\x01"), "\"a\\\"b\\\\c\\n\\u0001\"");
}

TEST(LoadReportTest, ReportCarriesTheFigures) {
  LoadReport report;
  report.target = "127.0.0.1:1";
  report.result.seconds = 2;
  report.result.calls.ok = 10;
  report.result.calls.AddError("NOT_FOUND", "unknown user \"x\"");
  report.result.calls.latency.p50_ns = 1500;
  const std::string json = LoadReportJson(report);
  EXPECT_NE(json.find("\"requests\": 11"), std::string::npos) << json;
  EXPECT_NE(json.find("\"requests_per_second\": 5.500"), std::string::npos) << json;
  EXPECT_NE(json.find("\"errors_by_code\": {\"NOT_FOUND\": 1}"), std::string::npos) << json;
  EXPECT_NE(json.find("\"p50_us\": 1.500"), std::string::npos) << json;
  EXPECT_NE(json.find("unknown user \\\"x\\\""), std::string::npos) << json;
  EXPECT_EQ(json.find("publish"), std::string::npos);
}

}  // namespace
}  // namespace plumb::tools
