// plumb.v1.Ranker over a real gRPC server on a loopback port, called by a real client: every
// documented status code and message, the standard health and reflection services, metrics
// and exposure accounting, deadlines and TLS.
#include <google/protobuf/descriptor.pb.h>
#include <grpcpp/grpcpp.h>
#include <gtest/gtest.h>

#include <cstdlib>
#include <fstream>
#include <map>
#include <set>
#include <thread>

#include "plumb/v1/ranker.grpc.pb.h"
#include "server/exposure_sink.h"
#include "server/ranker_service.h"
#include "server/ranking_server.h"
#include "server/scorer.h"
#include "server/serving_metrics.h"
#include "server/snapshot_holder.h"
#include "tests/server/generic_rpc.h"
#include "tests/server/test_model.h"

namespace plumb::server {
namespace {

using plumb::v1::Ranker;
using testing::HealthCheck;
using testing::RandomModel;
using testing::TestModel;

constexpr int kServing = 1, kNotServing = 2;  // grpc.health.v1 ServingStatus

// The value of a counter or gauge sample with exactly these labels, or -1 if absent.
double Sample(const ServingMetrics& metrics, const std::string& name,
              const std::map<std::string, std::string>& labels = {}) {
  for (const auto& family : metrics.Collect()) {
    if (family.name != name) continue;
    for (const auto& m : family.metric) {
      std::map<std::string, std::string> got;
      for (const auto& l : m.label) got[l.name] = l.value;
      if (got != labels) continue;
      return family.type == prometheus::MetricType::Counter ? m.counter.value : m.gauge.value;
    }
  }
  return -1;
}

class RankerServerTest : public ::testing::Test {
 public:
  void SetUp() override { Start(EndpointOptions{}); }

  void Start(EndpointOptions endpoint) {
    metrics_ = std::make_unique<ServingMetrics>(&holder_, nullptr, &exposure_);
    service_ = std::make_unique<RankerService>(&holder_, &scorer_, RankerLimits{}, &exposure_,
                                               metrics_.get());
    service_->set_auth(auth_);
    endpoint.listen = "127.0.0.1:0";
    Status s = RankingServer::Start(endpoint, service_.get(), &server_);
    ASSERT_TRUE(s.ok()) << s.ToString();
    ASSERT_GT(server_->port(), 0);
    channel_ = grpc::CreateChannel("127.0.0.1:" + std::to_string(server_->port()),
                                   grpc::InsecureChannelCredentials());
    stub_ = Ranker::NewStub(channel_);
  }

  void Load(const TestModel& m, uint64_t version) {
    holder_.Swap(testing::BuildSnapshot(m, version));
    server_->SetServing(true);
  }

  template <typename Req, typename Resp>
  grpc::Status Call(grpc::Status (Ranker::Stub::*method)(grpc::ClientContext*, const Req&, Resp*),
                    const Req& request, Resp* response) {
    grpc::ClientContext context;
    context.set_deadline(std::chrono::system_clock::now() + std::chrono::seconds(10));
    if (!authorization_.empty()) context.AddMetadata("authorization", authorization_);
    return (stub_.get()->*method)(&context, request, response);
  }
  grpc::Status Recommend(const v1::RecommendRequest& r, v1::RecommendResponse* out) {
    return Call(&Ranker::Stub::Recommend, r, out);
  }
  grpc::Status RankCandidates(const v1::RankCandidatesRequest& r, v1::RankCandidatesResponse* out) {
    return Call(&Ranker::Stub::RankCandidates, r, out);
  }
  grpc::Status SimilarItems(const v1::SimilarItemsRequest& r, v1::SimilarItemsResponse* out) {
    return Call(&Ranker::Stub::SimilarItems, r, out);
  }

  SnapshotHolder holder_;
  Scorer scorer_;
  ExposureCounter exposure_;
  std::unique_ptr<ServingMetrics> metrics_;
  std::unique_ptr<RankerService> service_;
  std::unique_ptr<RankingServer> server_;
  std::shared_ptr<grpc::Channel> channel_;
  std::unique_ptr<Ranker::Stub> stub_;
  const rpc::BearerAuth* auth_ = nullptr;  // set before Start() to require a token
  std::string authorization_;              // metadata the client sends, if any
};

v1::RecommendRequest RecommendFor(const std::string& user, uint32_t count) {
  v1::RecommendRequest r;
  r.set_user_id(user);
  r.set_count(count);
  return r;
}

TEST_F(RankerServerTest, UnavailableAndNotServingUntilTheFirstSnapshot) {
  v1::RecommendResponse rec;
  grpc::Status s = Recommend(RecommendFor("member-1", 5), &rec);
  EXPECT_EQ(s.error_code(), grpc::StatusCode::UNAVAILABLE);
  EXPECT_NE(s.error_message().find("no embedding version"), std::string::npos);
  v1::RankCandidatesRequest rc;
  rc.set_user_id("member-1");
  rc.add_candidate_item_ids("tool-1");
  v1::RankCandidatesResponse rc_out;
  EXPECT_EQ(RankCandidates(rc, &rc_out).error_code(), grpc::StatusCode::UNAVAILABLE);
  v1::SimilarItemsRequest si;
  si.set_item_id("tool-1");
  si.set_count(3);
  v1::SimilarItemsResponse si_out;
  EXPECT_EQ(SimilarItems(si, &si_out).error_code(), grpc::StatusCode::UNAVAILABLE);
  EXPECT_EQ(HealthCheck(channel_, ""), kNotServing);
  EXPECT_EQ(HealthCheck(channel_, "plumb.v1.Ranker"), kNotServing);

  Load(RandomModel(5, 50, 4, 3, 1, false), 7);
  EXPECT_EQ(HealthCheck(channel_, ""), kServing);
  EXPECT_EQ(HealthCheck(channel_, "plumb.v1.Ranker"), kServing);
  grpc::Status unknown_service;
  EXPECT_EQ(HealthCheck(channel_, "no.such.Service", &unknown_service), -1);
  EXPECT_EQ(unknown_service.error_code(), grpc::StatusCode::NOT_FOUND);  // per health.proto
  ASSERT_TRUE(Recommend(RecommendFor("member-1", 5), &rec).ok());
  EXPECT_EQ(rec.model_version(), 7u);
}

// Seen items are left out unless the request sets include_seen (the field's zero value is
// the common case). Asking for the whole catalogue but tool-0 shows it: by default the user's
// 10 training items are missing; with include_seen they come back, ranked as the scorer
// ranks them.
TEST_F(RankerServerTest, IncludeSeenBringsBackTheUsersTrainingItems) {
  const TestModel m = RandomModel(20, 300, 8, 10, 2, false);
  Load(m, 3);
  v1::RecommendResponse response;
  RankedList direct;
  std::vector<std::string_view> ex = {"tool-0"};
  RecommendQuery q;
  q.user_id = "member-4";
  q.exclude_item_ids = ex;
  std::set<std::string> seen;
  for (uint32_t s : m.seen[4]) seen.insert(m.item_ids[s]);
  const int all_but_one = 299;
  const int expected_without = all_but_one - static_cast<int>(seen.size() - seen.count("tool-0"));
  auto everything = RecommendFor("member-4", all_but_one);
  everything.add_exclude_item_ids("tool-0");
  ASSERT_TRUE(Recommend(everything, &response).ok());
  EXPECT_EQ(response.items_size(), expected_without);
  for (const auto& item : response.items()) EXPECT_EQ(seen.count(item.item_id()), 0u);
  everything.set_include_seen(true);
  ASSERT_TRUE(Recommend(everything, &response).ok());
  ASSERT_EQ(response.items_size(), all_but_one);
  q.count = all_but_one;
  q.exclude_seen = false;
  ASSERT_TRUE(scorer_.Recommend(*holder_.Get(), q, &direct).ok());
  for (int r = 0; r < all_but_one; ++r) {
    EXPECT_EQ(response.items(r).item_id(), m.item_ids[direct.items[r].index]);
  }
}

// With a token configured, a caller without it learns nothing: not whether a user exists
// (NOT_FOUND vs OK), not a user's history, not even which field of its request was wrong.
TEST_F(RankerServerTest, ATokenIsRequiredWhenConfiguredAndHealthStaysOpen) {
  const rpc::BearerAuth auth("s3cret-token");
  auth_ = &auth;
  Start(EndpointOptions{});
  Load(RandomModel(5, 50, 4, 3, 1, false), 2);
  v1::RecommendResponse rec;
  for (const std::string& metadata :
       {std::string(), std::string("Bearer wrong-token"), std::string("Basic s3cret-token")}) {
    authorization_ = metadata;
    for (const char* user : {"member-1", "nobody-at-all"}) {
      EXPECT_EQ(Recommend(RecommendFor(user, 5), &rec).error_code(),
                grpc::StatusCode::UNAUTHENTICATED)
          << metadata << " " << user;
    }
    EXPECT_EQ(Recommend(RecommendFor("", 0), &rec).error_code(),
              grpc::StatusCode::UNAUTHENTICATED);  // not INVALID_ARGUMENT
    v1::RankCandidatesRequest rc;
    rc.set_user_id("member-1");
    rc.add_candidate_item_ids("tool-1");
    v1::RankCandidatesResponse rc_out;
    EXPECT_EQ(RankCandidates(rc, &rc_out).error_code(), grpc::StatusCode::UNAUTHENTICATED);
    v1::SimilarItemsRequest si;
    si.set_item_id("tool-1");
    si.set_count(3);
    v1::SimilarItemsResponse si_out;
    EXPECT_EQ(SimilarItems(si, &si_out).error_code(), grpc::StatusCode::UNAUTHENTICATED);
  }
  EXPECT_EQ(HealthCheck(channel_, ""), kServing);  // load balancers need no token
  EXPECT_EQ(Sample(*metrics_, "plumb_requests_total",
                   {{"method", "Recommend"}, {"code", "UNAUTHENTICATED"}}),
            9);

  authorization_ = "bearer s3cret-token";  // the scheme is case-insensitive (RFC 7235)
  ASSERT_TRUE(Recommend(RecommendFor("member-1", 5), &rec).ok());
  EXPECT_EQ(rec.items_size(), 5);
  EXPECT_EQ(Recommend(RecommendFor("nobody-at-all", 5), &rec).error_code(),
            grpc::StatusCode::NOT_FOUND);
}

TEST_F(RankerServerTest, ResponsesCarryIdsScoresAndVersionAndAreCounted) {
  const TestModel m = RandomModel(20, 300, 8, 10, 2, false);
  Load(m, 3);
  auto request = RecommendFor("member-4", 12);  // include_seen unset: seen items left out
  request.add_exclude_item_ids("tool-0");
  v1::RecommendResponse response;
  ASSERT_TRUE(Recommend(request, &response).ok());
  ASSERT_EQ(response.items_size(), 12);
  EXPECT_EQ(response.model_version(), 3u);
  EXPECT_FALSE(response.folded_in());
  EXPECT_FALSE(response.fallback());
  // The same answer as the scorer gives in-process, translated to ids.
  RankedList direct;
  std::vector<std::string_view> ex = {"tool-0"};
  RecommendQuery q;
  q.user_id = "member-4";
  q.count = 12;
  q.exclude_seen = true;
  q.exclude_item_ids = ex;
  ASSERT_TRUE(scorer_.Recommend(*holder_.Get(), q, &direct).ok());
  for (int r = 0; r < 12; ++r) {
    EXPECT_EQ(response.items(r).item_id(), m.item_ids[direct.items[r].index]);
    EXPECT_EQ(response.items(r).score(), direct.items[r].score);
  }

  v1::RecommendRequest fallback = RecommendFor("member-new", 4);
  fallback.set_unknown_user(v1::UNKNOWN_USER_MOST_INTERACTED);
  ASSERT_TRUE(Recommend(fallback, &response).ok());
  EXPECT_TRUE(response.fallback());
  EXPECT_EQ(response.items_size(), 4);

  v1::RecommendRequest folded = RecommendFor("member-new", 6);
  folded.add_recent_item_ids("tool-3");
  folded.add_recent_item_ids("tool-4");
  ASSERT_TRUE(Recommend(folded, &response).ok());
  EXPECT_TRUE(response.folded_in());
  EXPECT_EQ(response.items_size(), 6);

  v1::RankCandidatesRequest rc;
  rc.set_user_id("member-4");
  for (const char* id : {"tool-5", "tool-ghost", "tool-6", "tool-5"}) rc.add_candidate_item_ids(id);
  v1::RankCandidatesResponse rc_out;
  ASSERT_TRUE(RankCandidates(rc, &rc_out).ok());
  EXPECT_EQ(rc_out.items_size(), 2);
  ASSERT_EQ(rc_out.unknown_item_ids_size(), 1);
  EXPECT_EQ(rc_out.unknown_item_ids(0), "tool-ghost");
  EXPECT_EQ(rc_out.model_version(), 3u);

  v1::SimilarItemsRequest si;
  si.set_item_id("tool-9");
  si.set_count(5);
  v1::SimilarItemsResponse si_out;
  ASSERT_TRUE(SimilarItems(si, &si_out).ok());
  EXPECT_EQ(si_out.items_size(), 5);
  for (const auto& item : si_out.items()) {
    EXPECT_NE(item.item_id(), "tool-9");
    EXPECT_LE(item.score(), 1.0f + 1e-6f);
  }

  // Five lists served: 12 + 4 + 6 + 2 + 5 slots.
  EXPECT_EQ(exposure_.lists(), 5u);
  EXPECT_EQ(exposure_.slots(), 29u);
  EXPECT_EQ(Sample(*metrics_, "plumb_requests_total", {{"method", "Recommend"}, {"code", "OK"}}),
            3);
  EXPECT_EQ(Sample(*metrics_, "plumb_requests_total", {{"method", "SimilarItems"}, {"code", "OK"}}),
            1);
  EXPECT_EQ(Sample(*metrics_, "plumb_model_version"), 3);
  EXPECT_EQ(Sample(*metrics_, "plumb_served_slots_total"), 29);
}

struct ErrorCase {
  std::string name;
  std::function<grpc::Status(RankerServerTest*)> call;
  grpc::StatusCode code;
  std::string message_part;  // the field the message must name
};

TEST_F(RankerServerTest, EveryErrorPathReturnsItsDocumentedCodeAndNamesTheField) {
  Load(RandomModel(5, 50, 4, 3, 1, false), 1);
  const std::string long_id(257, 'x');
  const std::string max_id(256, 'x');
  auto rec = [](v1::RecommendRequest r) {
    return [r](RankerServerTest* t) {
      v1::RecommendResponse out;
      return t->Recommend(r, &out);
    };
  };
  auto cand = [](v1::RankCandidatesRequest r) {
    return [r](RankerServerTest* t) {
      v1::RankCandidatesResponse out;
      return t->RankCandidates(r, &out);
    };
  };
  auto sim = [](v1::SimilarItemsRequest r) {
    return [r](RankerServerTest* t) {
      v1::SimilarItemsResponse out;
      return t->SimilarItems(r, &out);
    };
  };
  auto with = [](auto request, auto edit) {
    edit(request);
    return request;
  };
  const auto ok_rec = RecommendFor("member-1", 5);
  v1::RankCandidatesRequest ok_cand;
  ok_cand.set_user_id("member-1");
  ok_cand.add_candidate_item_ids("tool-1");
  v1::SimilarItemsRequest ok_sim;
  ok_sim.set_item_id("tool-1");
  ok_sim.set_count(3);
  using C = grpc::StatusCode;
  const std::vector<ErrorCase> cases = {
      {"recommend empty user", rec(RecommendFor("", 5)), C::INVALID_ARGUMENT, "user_id"},
      {"recommend long user", rec(RecommendFor(long_id, 5)), C::INVALID_ARGUMENT,
       "user_id is 257 bytes"},
      {"recommend count 0", rec(RecommendFor("member-1", 0)), C::INVALID_ARGUMENT,
       "count must be 1..1000, got 0"},
      {"recommend count 1001", rec(RecommendFor("member-1", 1001)), C::INVALID_ARGUMENT,
       "count must be 1..1000, got 1001"},
      {"recommend 10001 exclusions",
       rec(with(ok_rec,
                [](auto& r) {
                  for (int i = 0; i < 10001; ++i) r.add_exclude_item_ids("t");
                })),
       C::INVALID_ARGUMENT, "exclude_item_ids has 10001 entries; the limit is 10000"},
      {"recommend empty exclusion",
       rec(with(ok_rec,
                [](auto& r) {
                  r.add_exclude_item_ids("tool-1");
                  r.add_exclude_item_ids("");
                })),
       C::INVALID_ARGUMENT, "exclude_item_ids[1]"},
      {"recommend long exclusion",
       rec(with(ok_rec, [&](auto& r) { r.add_exclude_item_ids(long_id); })), C::INVALID_ARGUMENT,
       "exclude_item_ids[0] is 257 bytes"},
      {"recommend 1001 recent",
       rec(with(ok_rec,
                [](auto& r) {
                  for (int i = 0; i < 1001; ++i) r.add_recent_item_ids("t");
                })),
       C::INVALID_ARGUMENT, "recent_item_ids has 1001 entries; the limit is 1000"},
      {"recommend long recent",
       rec(with(ok_rec,
                [&](auto& r) {
                  r.add_recent_item_ids("tool-1");
                  r.add_recent_item_ids(long_id);
                })),
       C::INVALID_ARGUMENT, "recent_item_ids[1] is 257 bytes"},
      {"recommend bad policy",
       rec(with(ok_rec,
                [](auto& r) { r.set_unknown_user(static_cast<v1::UnknownUserPolicy>(9)); })),
       C::INVALID_ARGUMENT, "unknown_user"},
      {"recommend unknown user", rec(RecommendFor("member-404", 5)), C::NOT_FOUND,
       "user_id 'member-404'"},
      {"recommend unknown user, unknown recent",
       rec(with(RecommendFor("member-404", 5), [](auto& r) { r.add_recent_item_ids("tool-404"); })),
       C::NOT_FOUND, "none of its 1 recent_item_ids"},
      {"candidates empty user", cand(with(ok_cand, [](auto& r) { r.set_user_id(""); })),
       C::INVALID_ARGUMENT, "user_id"},
      {"candidates none", cand(with(ok_cand, [](auto& r) { r.clear_candidate_item_ids(); })),
       C::INVALID_ARGUMENT, "candidate_item_ids is required"},
      {"candidates 10001",
       cand(with(ok_cand,
                 [](auto& r) {
                   for (int i = 0; i < 10000; ++i) r.add_candidate_item_ids("t");
                 })),
       C::INVALID_ARGUMENT, "candidate_item_ids has 10001 entries; the limit is 10000"},
      {"candidates empty id", cand(with(ok_cand, [](auto& r) { r.add_candidate_item_ids(""); })),
       C::INVALID_ARGUMENT, "candidate_item_ids[1]"},
      {"candidates long id",
       cand(with(ok_cand, [&](auto& r) { r.add_candidate_item_ids(long_id); })),
       C::INVALID_ARGUMENT, "candidate_item_ids[1] is 257 bytes"},
      {"candidates 1001 recent",
       cand(with(ok_cand,
                 [](auto& r) {
                   for (int i = 0; i < 1001; ++i) r.add_recent_item_ids("t");
                 })),
       C::INVALID_ARGUMENT, "recent_item_ids has 1001 entries"},
      {"candidates unknown user", cand(with(ok_cand, [](auto& r) { r.set_user_id("member-404"); })),
       C::NOT_FOUND, "user_id 'member-404'"},
      {"similar empty item", sim(with(ok_sim, [](auto& r) { r.set_item_id(""); })),
       C::INVALID_ARGUMENT, "item_id"},
      {"similar long item", sim(with(ok_sim, [&](auto& r) { r.set_item_id(long_id); })),
       C::INVALID_ARGUMENT, "item_id is 257 bytes"},
      {"similar count 0", sim(with(ok_sim, [](auto& r) { r.set_count(0); })), C::INVALID_ARGUMENT,
       "count"},
      {"similar count 1001", sim(with(ok_sim, [](auto& r) { r.set_count(1001); })),
       C::INVALID_ARGUMENT, "count"},
      {"similar 10001 exclusions",
       sim(with(ok_sim,
                [](auto& r) {
                  for (int i = 0; i < 10001; ++i) r.add_exclude_item_ids("t");
                })),
       C::INVALID_ARGUMENT, "exclude_item_ids has 10001 entries"},
      {"similar unknown item", sim(with(ok_sim, [](auto& r) { r.set_item_id("tool-404"); })),
       C::NOT_FOUND, "item_id 'tool-404'"},
  };
  for (const ErrorCase& c : cases) {
    grpc::Status s = c.call(this);
    EXPECT_EQ(s.error_code(), c.code) << c.name << ": " << s.error_message();
    EXPECT_NE(s.error_message().find(c.message_part), std::string::npos)
        << c.name << ": message was '" << s.error_message() << "'";
  }
  // The limits themselves are allowed: a 256-byte id, count 1000, 10000 exclusions.
  v1::RecommendResponse out;
  auto at_limits = RecommendFor("member-1", 1000);
  at_limits.add_exclude_item_ids(max_id);
  for (int i = 1; i < 10000; ++i) at_limits.add_exclude_item_ids("tool-" + std::to_string(i % 60));
  EXPECT_TRUE(Recommend(at_limits, &out).ok());
  EXPECT_EQ(Sample(*metrics_, "plumb_requests_total",
                   {{"method", "Recommend"}, {"code", "INVALID_ARGUMENT"}}),
            10);
  EXPECT_EQ(
      Sample(*metrics_, "plumb_requests_total", {{"method", "Recommend"}, {"code", "NOT_FOUND"}}),
      2);
  EXPECT_EQ(exposure_.lists(), 1u);  // failed calls serve nothing
}

// A request whose deadline passes during the scan stops early and answers
// DEADLINE_EXCEEDED. The client sees DEADLINE_EXCEEDED either way, so the server's own
// answer is read from its metrics: with OK there, the scan would have run to the end.
// 300,000 x 64 items take several milliseconds to scan; deadlines from 1 to 40 ms are
// tried so that some land inside the scan whatever the machine's speed.
TEST_F(RankerServerTest, DeadlinesPassingDuringTheScanStopItEarly) {
  // Every item the same vector: all scores tie, so the pruned scan cannot rule any row out and
  // computes all 300,000 exact scores (a few ms), long enough for short deadlines to pass.
  TestModel model = RandomModel(2, 300'000, 64, 0, 9, false);
  for (size_t k = 0; k < model.items.size(); ++k) model.items[k] = model.items[k % 64];
  Load(std::move(model), 1);
  int client_deadline_exceeded = 0;
  for (int ms = 1; ms <= 40; ++ms) {
    grpc::ClientContext context;
    context.set_deadline(std::chrono::system_clock::now() + std::chrono::milliseconds(ms));
    v1::RecommendResponse out;
    grpc::Status s = stub_->Recommend(&context, RecommendFor("member-0", 10), &out);
    client_deadline_exceeded += s.error_code() == grpc::StatusCode::DEADLINE_EXCEEDED;
  }
  EXPECT_GT(client_deadline_exceeded, 0);
  double server_side = 0;
  for (int wait = 0; wait < 200 && server_side == 0; ++wait) {
    server_side = std::max(0.0, Sample(*metrics_, "plumb_requests_total",
                                       {{"method", "Recommend"}, {"code", "DEADLINE_EXCEEDED"}}));
    std::this_thread::sleep_for(std::chrono::milliseconds(10));
  }
  EXPECT_GT(server_side, 0) << "no request was stopped by the server";
}

TEST_F(RankerServerTest, ReflectionDescribesTheRankerToGenericTools) {
  // ServerReflectionRequest.list_services = 7.
  google::protobuf::UnknownFieldSet list;
  list.AddLengthDelimited(7, "");
  google::protobuf::UnknownFieldSet file;
  file.AddLengthDelimited(4, "plumb.v1.Ranker");  // file_containing_symbol
  std::string list_bytes, file_bytes;
  list.SerializeToString(&list_bytes);
  file.SerializeToString(&file_bytes);
  std::vector<std::string> responses;
  grpc::Status s = testing::GenericBidi(
      channel_, "/grpc.reflection.v1alpha.ServerReflection/ServerReflectionInfo",
      {list_bytes, file_bytes}, &responses);
  ASSERT_TRUE(s.ok()) << s.error_message();
  ASSERT_EQ(responses.size(), 2u);

  // ServerReflectionResponse.list_services_response = 6 -> service = 1 -> name = 1.
  std::set<std::string> services;
  for (const std::string& lsr : testing::BytesFields(responses[0], 6))
    for (const std::string& svc : testing::BytesFields(lsr, 1))
      for (const std::string& name : testing::BytesFields(svc, 1)) services.insert(name);
  EXPECT_TRUE(services.count("plumb.v1.Ranker"));
  EXPECT_TRUE(services.count("grpc.health.v1.Health"));

  // file_descriptor_response = 4 -> file_descriptor_proto = 1 (serialized FileDescriptorProto).
  bool found = false;
  for (const std::string& fdr : testing::BytesFields(responses[1], 4)) {
    for (const std::string& proto : testing::BytesFields(fdr, 1)) {
      google::protobuf::FileDescriptorProto fd;
      ASSERT_TRUE(fd.ParseFromString(proto));
      if (fd.name() != "plumb/v1/ranker.proto") continue;
      found = true;
      ASSERT_EQ(fd.service_size(), 1);
      EXPECT_EQ(fd.service(0).name(), "Ranker");
      std::set<std::string> methods;
      for (const auto& m : fd.service(0).method()) methods.insert(m.name());
      EXPECT_EQ(methods, (std::set<std::string>{"Recommend", "RankCandidates", "SimilarItems"}));
    }
  }
  EXPECT_TRUE(found);
}

TEST(RankingServerTlsTest, ServesOverTlsAndRefusesPlaintextClients) {
  if (std::system("command -v openssl >/dev/null 2>&1") != 0) GTEST_SKIP() << "no openssl";
  testing::ScratchDir dir;
  const std::string cmd =
      "openssl req -x509 -newkey rsa:2048 -nodes -days 1 -subj /CN=localhost"
      " -addext subjectAltName=DNS:localhost -keyout " +
      dir.Sub("key.pem") + " -out " + dir.Sub("cert.pem") + " >/dev/null 2>&1";
  ASSERT_EQ(std::system(cmd.c_str()), 0);

  SnapshotHolder holder;
  holder.Swap(testing::BuildSnapshot(RandomModel(3, 30, 4, 2, 1, false), 2));
  Scorer scorer;
  RankerService service(&holder, &scorer, RankerLimits{}, nullptr, nullptr);
  EndpointOptions options;
  options.listen = "127.0.0.1:0";
  options.tls_cert_file = dir.Sub("cert.pem");
  EXPECT_EQ(RankingServer::Start(options, &service, nullptr).code(),
            Status::Code::kInvalidArgument);  // a certificate without its key
  options.tls_key_file = dir.Sub("missing.pem");
  EXPECT_EQ(RankingServer::Start(options, &service, nullptr).code(), Status::Code::kIoError);
  options.tls_key_file = dir.Sub("key.pem");
  std::unique_ptr<RankingServer> server;
  ASSERT_TRUE(RankingServer::Start(options, &service, &server).ok());
  const std::string target = "127.0.0.1:" + std::to_string(server->port());

  std::ifstream cert_in(dir.Sub("cert.pem"));
  std::string cert((std::istreambuf_iterator<char>(cert_in)), std::istreambuf_iterator<char>());
  grpc::SslCredentialsOptions ssl;
  ssl.pem_root_certs = cert;
  grpc::ChannelArguments args;
  args.SetSslTargetNameOverride("localhost");
  auto tls = Ranker::NewStub(grpc::CreateCustomChannel(target, grpc::SslCredentials(ssl), args));
  grpc::ClientContext ctx;
  ctx.set_deadline(std::chrono::system_clock::now() + std::chrono::seconds(10));
  v1::RecommendResponse out;
  grpc::Status s = tls->Recommend(&ctx, RecommendFor("member-1", 3), &out);
  EXPECT_TRUE(s.ok()) << s.error_message();
  EXPECT_EQ(out.model_version(), 2u);

  auto plain = Ranker::NewStub(grpc::CreateChannel(target, grpc::InsecureChannelCredentials()));
  grpc::ClientContext ctx2;
  ctx2.set_deadline(std::chrono::system_clock::now() + std::chrono::seconds(3));
  EXPECT_FALSE(plain->Recommend(&ctx2, RecommendFor("member-1", 3), &out).ok());
}

}  // namespace
}  // namespace plumb::server
