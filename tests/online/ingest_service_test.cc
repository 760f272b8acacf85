#include "trainer/online/ingest_service.h"

#include <gtest/gtest.h>

#include <limits>
#include <set>
#include <string>
#include <vector>

#include "store/store.h"
#include "tests/common/scratch_dir.h"
#include "tests/online/ingest_server.h"
#include "tests/online/memory_event_log.h"
#include "tests/online/names.h"

namespace plumb::online {
namespace {

using ::plumb::testing::ScratchDir;
using plumb::v1::InteractionEvent;
using plumb::v1::PublishSummary;
using testing::IngestServer;
using testing::MemoryEventLog;
using testing::Name;
using testing::Stream;
using testing::WireEvent;

TEST(IngestService, BadEventsAreRejectedWithReasonsAndTheRestAccepted) {
  MemoryEventLog log;
  IngestServer server(&log);
  auto stub = server.Stub();

  // Good events interleaved with one bad event of each kind (limits per ingest.proto).
  std::vector<InteractionEvent> events;
  struct Bad {
    InteractionEvent event;
    plumb::v1::RejectReason wire;
    RejectReason reason;
  };
  std::vector<Bad> bad = {
      {WireEvent("", "drill", "b0"), plumb::v1::REJECT_EMPTY_USER_ID, RejectReason::kEmptyUserId},
      {WireEvent("m1", "", "b1"), plumb::v1::REJECT_EMPTY_ITEM_ID, RejectReason::kEmptyItemId},
      {WireEvent(std::string(257, 'm'), "saw", "b2"), plumb::v1::REJECT_ID_TOO_LONG,
       RejectReason::kIdTooLong},
      {WireEvent("m1", "saw", "b3", -2.0f), plumb::v1::REJECT_BAD_WEIGHT, RejectReason::kBadWeight},
      {WireEvent("m1", "saw", "b4", std::numeric_limits<float>::quiet_NaN()),
       plumb::v1::REJECT_BAD_WEIGHT, RejectReason::kBadWeight},
      {WireEvent("m1", "saw", "b5", 1.0f, -5), plumb::v1::REJECT_BAD_TIMESTAMP,
       RejectReason::kBadTimestamp},
      {WireEvent("m1", "saw", std::string(129, 'e')), plumb::v1::REJECT_BAD_EVENT_ID,
       RejectReason::kBadEventId},
      {WireEvent("m\x01", "saw", "b7"), plumb::v1::REJECT_BAD_ID, RejectReason::kBadId},
      {WireEvent("m1", "saw", "b8", 1.0f, std::numeric_limits<int64_t>::max()),
       plumb::v1::REJECT_FUTURE_TIMESTAMP, RejectReason::kFutureTimestamp},
  };
  std::vector<uint64_t> bad_index;
  for (size_t i = 0; i < bad.size(); ++i) {
    events.push_back(WireEvent(Name("member-", i), "ladder", Name("g", i), 0.0f,
                               0));  // weight and time defaulted
    bad_index.push_back(events.size());
    events.push_back(bad[i].event);
  }
  events.push_back(WireEvent("member-last", "ladder", "g-last"));

  PublishSummary summary;
  grpc::Status status = Stream(stub.get(), events, &summary);
  ASSERT_TRUE(status.ok()) << status.error_message();
  EXPECT_EQ(summary.accepted(), bad.size() + 1);
  EXPECT_EQ(summary.rejected(), bad.size());
  EXPECT_EQ(summary.duplicates(), 0u);
  EXPECT_EQ(summary.last_sequence(), bad.size() + 1);
  ASSERT_EQ(summary.rejections_size(), static_cast<int>(bad.size()));
  for (size_t i = 0; i < bad.size(); ++i) {
    const plumb::v1::Rejection& r = summary.rejections(static_cast<int>(i));
    EXPECT_EQ(r.index(), bad_index[i]);
    EXPECT_EQ(r.reason(), bad[i].wire) << r.detail();
    EXPECT_FALSE(r.detail().empty());
    EXPECT_EQ(r.event_id(), bad[i].event.event_id());
  }
  // Counted by reason in plumb_events_rejected_total.
  EXPECT_EQ(server.metrics().rejected(RejectReason::kBadWeight), 2.0);
  for (RejectReason reason :
       {RejectReason::kEmptyUserId, RejectReason::kEmptyItemId, RejectReason::kIdTooLong,
        RejectReason::kBadTimestamp, RejectReason::kBadEventId, RejectReason::kBadId}) {
    EXPECT_EQ(server.metrics().rejected(reason), 1.0) << RejectReasonLabel(reason);
  }
  // Only the good events reached the log, normalised, in stream order.
  const auto stored = log.events();
  ASSERT_EQ(stored.size(), bad.size() + 1);
  EXPECT_EQ(stored[0].user_id, "member-0");
  EXPECT_EQ(stored[0].weight, 1.0f);
  EXPECT_GT(stored[0].timestamp_ms, 1'600'000'000'000);  // received time, not 0
  EXPECT_EQ(stored.back().event_id, "g-last");
}

TEST(IngestService, RejectionListIsCappedButNotTheCount) {
  MemoryEventLog log;
  IngestServer server(&log);
  auto stub = server.Stub();
  std::vector<InteractionEvent> events(250, WireEvent("", "hammer"));
  events.push_back(WireEvent("m", "hammer"));
  PublishSummary summary;
  ASSERT_TRUE(Stream(stub.get(), events, &summary).ok());
  EXPECT_EQ(summary.rejected(), 250u);
  EXPECT_EQ(summary.rejections_size(), 100);  // cap from ingest.proto
  EXPECT_EQ(summary.rejections(99).index(), 99u);
  EXPECT_EQ(summary.accepted(), 1u);
  EXPECT_EQ(server.metrics().rejected(RejectReason::kEmptyUserId), 250.0);
}

TEST(IngestService, LongStreamIsStoredCompleteAndInOrder) {
  MemoryEventLog log;
  GroupCommitOptions options;
  options.window = std::chrono::microseconds(500);
  IngestServer server(&log, nullptr, options);
  auto stub = server.Stub();
  constexpr int kEvents = 25'500;  // 25 full chunks and a partial one
  std::vector<InteractionEvent> events;
  for (int i = 0; i < kEvents; ++i) {
    events.push_back(WireEvent(Name("member-", i % 97), Name("tool-", i), Name("e", i)));
  }
  PublishSummary summary;
  ASSERT_TRUE(Stream(stub.get(), events, &summary).ok());
  EXPECT_EQ(summary.accepted(), uint64_t{kEvents});
  EXPECT_EQ(summary.last_sequence(), uint64_t{kEvents});
  const auto stored = log.events();
  ASSERT_EQ(stored.size(), size_t{kEvents});
  for (int i = 0; i < kEvents; i += 997) EXPECT_EQ(stored[i].event_id, Name("e", i));
  server.metrics().Refresh(server.committer().stats(), nullptr, 0);
  EXPECT_EQ(server.metrics().accepted(), double{kEvents});
}

TEST(IngestService, EmptyStreamReportsTheCurrentLogEnd) {
  MemoryEventLog log;
  IngestServer server(&log);
  auto stub = server.Stub();
  PublishSummary first, empty;
  ASSERT_TRUE(Stream(stub.get(), std::vector<InteractionEvent>{WireEvent("m", "i")}, &first).ok());
  ASSERT_TRUE(Stream(stub.get(), std::vector<InteractionEvent>{}, &empty).ok());
  EXPECT_EQ(empty.accepted(), 0u);
  EXPECT_EQ(empty.last_sequence(), 1u);
}

TEST(IngestService, PublishBatchOverTheLimitIsRefusedWhole) {
  MemoryEventLog log;
  IngestServer server(&log);
  auto stub = server.Stub();
  plumb::v1::PublishBatchRequest request;
  for (int i = 0; i < 10'001; ++i) {
    *request.add_events() = WireEvent(Name("m", i % 50), Name("i", i));
  }
  PublishSummary summary;
  grpc::ClientContext context;
  grpc::Status status = stub->PublishBatch(&context, request, &summary);
  EXPECT_EQ(status.error_code(), grpc::StatusCode::INVALID_ARGUMENT);
  EXPECT_NE(status.error_message().find("10001"), std::string::npos) << status.error_message();
  EXPECT_TRUE(log.events().empty());

  // Exactly at the limit (10000, per ingest.proto) it goes through.
  request.mutable_events()->RemoveLast();
  request.mutable_events()->RemoveLast();
  *request.add_events() = WireEvent("", "bad");  // one rejected, the rest accepted
  grpc::ClientContext context2;
  status = stub->PublishBatch(&context2, request, &summary);
  ASSERT_TRUE(status.ok()) << status.error_message();
  EXPECT_EQ(summary.accepted(), 9'999u);
  EXPECT_EQ(summary.rejected(), 1u);
  EXPECT_EQ(summary.rejections(0).index(), 9'999u);
  EXPECT_EQ(log.events().size(), 9'999u);
}

TEST(IngestService, StoreFailureAcknowledgesNothing) {
  MemoryEventLog log;
  log.set_failure(
      Status::IoError("While appending to file: events/000012.log: Input/output error"));
  IngestServer server(&log);
  auto stub = server.Stub();
  std::vector<InteractionEvent> events;
  for (int i = 0; i < 2'500; ++i) events.push_back(WireEvent("m", "i", Name("id", i)));
  PublishSummary summary;
  grpc::Status status = Stream(stub.get(), events, &summary);
  EXPECT_EQ(status.error_code(), grpc::StatusCode::UNAVAILABLE) << status.error_message();
  EXPECT_EQ(summary.accepted(), 0u);  // no summary was sent
  EXPECT_TRUE(log.events().empty());

  plumb::v1::PublishBatchRequest request;
  *request.add_events() = WireEvent("m", "i");
  grpc::ClientContext context;
  status = stub->PublishBatch(&context, request, &summary);
  EXPECT_EQ(status.error_code(), grpc::StatusCode::UNAVAILABLE);

  // A full disk, as the store reports it.
  log.set_failure(Status::ResourceExhausted(
      "appending events: IO error: No space left on device: While appending to file: "
      "000007.log"));
  grpc::ClientContext context2;
  status = stub->PublishBatch(&context2, request, &summary);
  EXPECT_EQ(status.error_code(), grpc::StatusCode::RESOURCE_EXHAUSTED) << status.error_message();
  EXPECT_TRUE(log.events().empty());
  server.metrics().Refresh(server.committer().stats(), nullptr, 0);
  EXPECT_EQ(server.metrics().accepted(), 0.0);

  // Once the log is healthy the client's resend goes through.
  log.set_failure(Status::Ok());
  ASSERT_TRUE(Stream(stub.get(), events, &summary).ok());
  EXPECT_EQ(summary.accepted(), 2'500u);
}

TEST(IngestService, FailureMidStreamAfterDurableChunksStillFailsTheCall) {
  // The log fails after the first writes: the call fails, and a resend with the same
  // event_ids completes the log without duplicates.
  MemoryEventLog log;
  GroupCommitOptions options;
  options.window = std::chrono::microseconds(0);
  IngestServer server(&log, nullptr, options);
  auto stub = server.Stub();
  std::vector<InteractionEvent> events;
  for (int i = 0; i < 5'000; ++i) events.push_back(WireEvent("m", "i", Name("id", i)));

  std::thread breaker([&] {
    while (log.size() < 1'000) std::this_thread::yield();
    log.set_failure(Status::IoError("injected"));
  });
  PublishSummary summary;
  grpc::Status status = Stream(stub.get(), events, &summary);
  breaker.join();
  const size_t stored_before = log.events().size();
  if (stored_before < events.size()) {
    EXPECT_EQ(status.error_code(), grpc::StatusCode::UNAVAILABLE);
  }
  log.set_failure(Status::Ok());
  ASSERT_TRUE(Stream(stub.get(), events, &summary).ok());
  EXPECT_EQ(summary.accepted() + summary.duplicates(), events.size());
  EXPECT_EQ(summary.duplicates(), stored_before);
  EXPECT_EQ(log.events().size(), events.size());
}

// The code decides, through rpc/grpc_status.h, never the wording: an IoError that happens to
// mention a full disk is still an I/O error (the store itself reports a full disk as
// ResourceExhausted).
TEST(IngestService, ErrorMapping) {
  EXPECT_EQ(AppendErrorToGrpc(Status::ResourceExhausted("quota")).error_code(),
            grpc::StatusCode::RESOURCE_EXHAUSTED);
  EXPECT_EQ(AppendErrorToGrpc(Status::IoError("IO error: No space left on device")).error_code(),
            grpc::StatusCode::UNAVAILABLE);
  EXPECT_EQ(AppendErrorToGrpc(Status::IoError("Input/output error")).error_code(),
            grpc::StatusCode::UNAVAILABLE);
  EXPECT_EQ(AppendErrorToGrpc(Status::Unavailable("shutting down")).error_code(),
            grpc::StatusCode::UNAVAILABLE);
  EXPECT_EQ(AppendErrorToGrpc(Status::InvalidArgument("bad")).error_code(),
            grpc::StatusCode::INVALID_ARGUMENT);
  EXPECT_EQ(AppendErrorToGrpc(Status::Corruption("event_ids: unreadable record")).error_code(),
            grpc::StatusCode::INTERNAL);
  const grpc::Status full = AppendErrorToGrpc(Status::ResourceExhausted("No space left"));
  EXPECT_NE(full.error_message().find("acknowledges nothing"), std::string::npos);
  EXPECT_NE(full.error_message().find("No space left"), std::string::npos);
}

// The same paths over the real store: duplicates by event_id are reported and the log
// holds each event once.
TEST(IngestServiceOnStore, DuplicatesAreReportedAndNotAppendedTwice) {
  ScratchDir dir;
  std::unique_ptr<store::Store> db;
  ASSERT_TRUE(store::Store::OpenPrimary(dir.Sub("db"), store::StoreOptions(), &db).ok());
  StoreEventLog log(db.get());
  IngestServer server(&log);
  auto stub = server.Stub();

  std::vector<InteractionEvent> first, second;
  for (int i = 0; i < 1'500; ++i) {
    first.push_back(WireEvent(Name("member-", i % 13), Name("tool-", i % 40), Name("loan-", i)));
  }
  second = first;                        // a client resending everything...
  for (int i = 1'500; i < 1'600; ++i) {  // ...plus 100 new events, 20 of them twice
    second.push_back(WireEvent("member-1", Name("tool-", i), Name("loan-", i)));
    if (i % 5 == 0) second.push_back(second.back());
  }
  PublishSummary s1, s2;
  ASSERT_TRUE(Stream(stub.get(), first, &s1).ok());
  EXPECT_EQ(s1.accepted(), 1'500u);
  EXPECT_EQ(s1.duplicates(), 0u);
  ASSERT_TRUE(Stream(stub.get(), second, &s2).ok());
  EXPECT_EQ(s2.accepted(), 100u);
  EXPECT_EQ(s2.duplicates(), 1'520u);
  EXPECT_EQ(s2.last_sequence(), 1'600u);

  std::vector<store::Event> stored;
  ASSERT_TRUE(db->ReadEvents(0, 10'000, &stored).ok());
  ASSERT_EQ(stored.size(), 1'600u);
  std::set<std::string> ids;
  for (const store::Event& e : stored) ids.insert(e.event_id);
  EXPECT_EQ(ids.size(), 1'600u);
  server.metrics().Refresh(server.committer().stats(), nullptr, 0);
  EXPECT_EQ(server.metrics().duplicates(), 1'520.0);
  EXPECT_EQ(server.metrics().accepted(), 1'600.0);
}

}  // namespace
}  // namespace plumb::online
