// ReplayEvents against an in-process EventIngest that records what it receives.
#include "tools/event_replay.h"

#include <grpcpp/grpcpp.h>
#include <gtest/gtest.h>

#include <fstream>
#include <mutex>
#include <set>
#include <sstream>

#include "plumb/v1/ingest.grpc.pb.h"
#include "tools/client_channel.h"

namespace plumb::tools {
namespace {

// Records every event and the authorization header; can fail the first calls with
// UNAVAILABLE and reject events whose item is "bad".
class RecordingIngest final : public plumb::v1::EventIngest::Service {
 public:
  grpc::Status PublishBatch(grpc::ServerContext* context,
                            const plumb::v1::PublishBatchRequest* request,
                            plumb::v1::PublishSummary* summary) override {
    std::vector<plumb::v1::InteractionEvent> events(request->events().begin(),
                                                    request->events().end());
    return Take(context, events, summary, /*streamed=*/false);
  }
  grpc::Status Publish(grpc::ServerContext* context,
                       grpc::ServerReader<plumb::v1::InteractionEvent>* reader,
                       plumb::v1::PublishSummary* summary) override {
    std::vector<plumb::v1::InteractionEvent> events;
    plumb::v1::InteractionEvent e;
    while (reader->Read(&e)) events.push_back(e);
    return Take(context, events, summary, /*streamed=*/true);
  }

  std::mutex mu;
  int fail_first = 0;                                 // calls to answer UNAVAILABLE
  std::vector<plumb::v1::InteractionEvent> received;  // appended events, in order
  std::vector<size_t> call_sizes;
  std::vector<bool> call_streamed;
  std::vector<std::string> authorization;
  std::set<std::string> seen_ids;

 private:
  grpc::Status Take(grpc::ServerContext* context,
                    const std::vector<plumb::v1::InteractionEvent>& events,
                    plumb::v1::PublishSummary* summary, bool streamed) {
    std::lock_guard<std::mutex> lock(mu);
    const auto auth = context->client_metadata().find("authorization");
    authorization.push_back(auth == context->client_metadata().end()
                                ? ""
                                : std::string(auth->second.data(), auth->second.size()));
    if (fail_first > 0) {
      --fail_first;
      return grpc::Status(grpc::StatusCode::UNAVAILABLE, "log busy");
    }
    call_sizes.push_back(events.size());
    call_streamed.push_back(streamed);
    for (size_t i = 0; i < events.size(); ++i) {
      const auto& e = events[i];
      if (e.item_id() == "bad") {
        summary->set_rejected(summary->rejected() + 1);
        auto* r = summary->add_rejections();
        r->set_index(i);
        r->set_reason(plumb::v1::REJECT_EMPTY_ITEM_ID);
        r->set_detail("made-up reason");
        continue;
      }
      if (!seen_ids.insert(e.event_id()).second) {
        summary->set_duplicates(summary->duplicates() + 1);
        continue;
      }
      received.push_back(e);
      summary->set_accepted(summary->accepted() + 1);
    }
    summary->set_last_sequence(received.size());
    return grpc::Status::OK;
  }
};

class EventReplayTest : public ::testing::Test {
 protected:
  void SetUp() override {
    grpc::ServerBuilder builder;
    int port = 0;
    builder.AddListeningPort("127.0.0.1:0", grpc::InsecureServerCredentials(), &port);
    builder.RegisterService(&ingest_);
    server_ = builder.BuildAndStart();
    ASSERT_NE(port, 0);
    ASSERT_TRUE(MakeChannel({"127.0.0.1:" + std::to_string(port), "", ""}, &channel_).ok());
  }
  void TearDown() override { server_->Shutdown(); }

  std::string WriteFile(const std::string& name, const std::string& text) {
    const std::string path = ::testing::TempDir() + "/" + name;
    std::ofstream(path, std::ios::trunc) << text;
    return path;
  }

  RecordingIngest ingest_;
  std::unique_ptr<grpc::Server> server_;
  std::shared_ptr<grpc::Channel> channel_;
};

// Line numbers count the header and blank lines, so generated ids name the file line.
constexpr char kHistory[] =
    "user,item,ts,event_id\n"  // line 1
    "m1,t1,1000,\n"            // 2
    "m2,t2,2000,own-id\n"      // 3
    "\n"                       // 4: blank, skipped
    "m3,t3,,\n"                // 5
    "m1,t2,4000,\n"            // 6
    "m2,t3,5000,\n";           // 7

// A spreadsheet's "CSV UTF-8" (byte-order mark EF BB BF first) replays like plain CSV, with
// the same line-numbered ids.
TEST_F(EventReplayTest, AFileWithAByteOrderMarkReplaysLikePlainCsv) {
  ReplayOptions options;
  options.events_file = WriteFile("history_bom.csv", std::string("\xEF\xBB\xBF") + kHistory);
  options.id_prefix = "h";
  ReplaySummary summary;
  std::ostringstream progress;
  const Status s = ReplayEvents(channel_, options, &progress, &summary);
  ASSERT_TRUE(s.ok()) << s.ToString();
  ASSERT_EQ(ingest_.received.size(), 5u);
  EXPECT_EQ(ingest_.received[0].user_id(), "m1");
  EXPECT_EQ(ingest_.received[0].event_id(), "h:2");
  EXPECT_EQ(ingest_.received[4].event_id(), "h:7");
}

TEST_F(EventReplayTest, SendsEveryEventInFileOrderWithLineIds) {
  ReplayOptions options;
  options.events_file = WriteFile("history.csv", kHistory);
  options.batch = 2;
  options.id_prefix = "h";
  options.bearer_token = "s3cret";
  ReplaySummary summary;
  std::ostringstream progress;
  const Status s = ReplayEvents(channel_, options, &progress, &summary);
  ASSERT_TRUE(s.ok()) << s.ToString();
  EXPECT_EQ(summary.events, 5u);
  EXPECT_EQ(summary.sent, 5u);
  EXPECT_EQ(summary.accepted, 5u);
  EXPECT_EQ(summary.last_sequence, 5u);
  ASSERT_EQ(ingest_.received.size(), 5u);
  const char* users[] = {"m1", "m2", "m3", "m1", "m2"};
  const char* ids[] = {"h:2", "own-id", "h:5", "h:6", "h:7"};
  for (size_t i = 0; i < 5; ++i) {
    EXPECT_EQ(ingest_.received[i].user_id(), users[i]);
    EXPECT_EQ(ingest_.received[i].event_id(), ids[i]);
  }
  EXPECT_EQ(ingest_.received[0].timestamp_ms(), 1000);
  EXPECT_EQ(ingest_.received[2].timestamp_ms(), 0);  // empty ts: the trainer's clock
  EXPECT_EQ(ingest_.call_sizes, (std::vector<size_t>{2, 2, 1}));
  for (const std::string& auth : ingest_.authorization) EXPECT_EQ(auth, "Bearer s3cret");
  EXPECT_NE(progress.str().find("5/5 events"), std::string::npos) << progress.str();
}

TEST_F(EventReplayTest, ReplayingTheSameFileAgainIsAllDuplicates) {
  ReplayOptions options;
  options.events_file = WriteFile("again.csv", kHistory);
  ReplaySummary first, second;
  ASSERT_TRUE(ReplayEvents(channel_, options, nullptr, &first).ok());
  ASSERT_TRUE(ReplayEvents(channel_, options, nullptr, &second).ok());
  EXPECT_EQ(first.accepted, 5u);
  EXPECT_EQ(second.accepted, 0u);
  EXPECT_EQ(second.duplicates, 5u);
  // The default prefix is a hash of the content: "f" + 16 hex digits.
  EXPECT_EQ(first.id_prefix.size(), 17u);
  EXPECT_EQ(first.id_prefix, second.id_prefix);
  // A file with different content gets different ids, so nothing of it is a duplicate.
  options.events_file = WriteFile("other.csv", std::string(kHistory) + "m9,t9,9000,\n");
  ReplaySummary third;
  ASSERT_TRUE(ReplayEvents(channel_, options, nullptr, &third).ok());
  EXPECT_NE(third.id_prefix, first.id_prefix);
  EXPECT_EQ(third.duplicates, 1u);  // only "own-id", an id the file itself chose
  EXPECT_EQ(third.accepted, 5u);
}

TEST_F(EventReplayTest, StreamModeUsesClientStreaming) {
  ReplayOptions options;
  options.events_file = WriteFile("streamed.csv", kHistory);
  options.stream = true;
  options.batch = 3;
  ReplaySummary summary;
  ASSERT_TRUE(ReplayEvents(channel_, options, nullptr, &summary).ok());
  EXPECT_EQ(summary.accepted, 5u);
  EXPECT_EQ(ingest_.call_sizes, (std::vector<size_t>{3, 2}));
  EXPECT_EQ(ingest_.call_streamed, (std::vector<bool>{true, true}));
}

TEST_F(EventReplayTest, TransientFailuresAreRetriedWithTheSameIds) {
  ingest_.fail_first = 2;
  ReplayOptions options;
  options.events_file = WriteFile("retried.csv", kHistory);
  options.id_prefix = "r";
  ReplaySummary summary;
  ASSERT_TRUE(ReplayEvents(channel_, options, nullptr, &summary).ok());
  EXPECT_EQ(summary.retried, 2u);
  EXPECT_EQ(summary.calls, 3u);
  EXPECT_EQ(summary.accepted, 5u);
  EXPECT_EQ(ingest_.received[0].event_id(), "r:2");
}

TEST_F(EventReplayTest, GivesUpAfterTheRetriesAndSaysWhere) {
  ingest_.fail_first = 100;
  ReplayOptions options;
  options.events_file = WriteFile("down.csv", kHistory);
  options.retries = 1;
  ReplaySummary summary;
  const Status s = ReplayEvents(channel_, options, nullptr, &summary);
  EXPECT_EQ(s.code(), Status::Code::kUnavailable);
  EXPECT_NE(s.message().find("UNAVAILABLE: log busy"), std::string::npos) << s.message();
  EXPECT_NE(s.message().find("down.csv:2"), std::string::npos) << s.message();
  EXPECT_EQ(summary.sent, 0u);
}

TEST_F(EventReplayTest, RejectionsNameTheFileLine) {
  ReplayOptions options;
  options.events_file = WriteFile("rejects.csv", "user,item\nm1,t1\nm2,bad\nm3,t3\n");
  ReplaySummary summary;
  ASSERT_TRUE(ReplayEvents(channel_, options, nullptr, &summary).ok());
  EXPECT_EQ(summary.accepted, 2u);
  EXPECT_EQ(summary.rejected, 1u);
  ASSERT_EQ(summary.rejections.size(), 1u);
  EXPECT_NE(summary.rejections[0].find("rejects.csv:3: REJECT_EMPTY_ITEM_ID: made-up reason"),
            std::string::npos)
      << summary.rejections[0];
}

// Safety of data: a malformed file is refused before anything is sent.
TEST_F(EventReplayTest, MalformedFileSendsNothing) {
  ReplayOptions options;
  options.events_file = WriteFile("broken.csv", "user,item\nm1,t1\nm2,\nm3,t3\n");
  ReplaySummary summary;
  const Status s = ReplayEvents(channel_, options, nullptr, &summary);
  EXPECT_EQ(s.code(), Status::Code::kInvalidArgument);
  EXPECT_NE(s.message().find("broken.csv:3"), std::string::npos) << s.message();
  EXPECT_TRUE(ingest_.call_sizes.empty());
  EXPECT_TRUE(ingest_.authorization.empty());
}

TEST_F(EventReplayTest, MissingFileIsNotFound) {
  ReplayOptions options;
  options.events_file = ::testing::TempDir() + "/no-such-file.csv";
  ReplaySummary summary;
  EXPECT_EQ(ReplayEvents(channel_, options, nullptr, &summary).code(), Status::Code::kNotFound);
}

}  // namespace
}  // namespace plumb::tools
