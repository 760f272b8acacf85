#include "trainer/online/event_validation.h"

#include <gtest/gtest.h>

#include <cmath>
#include <limits>

namespace plumb::online {
namespace {

// Limits and defaults from the wire contract, proto/plumb/v1/ingest.proto
// (InteractionEvent field comments).

// A receive time a little after Good()'s timestamp (events arrive after they happen).
constexpr int64_t kNow = 1'700'000'100'000;

store::EventInput Good() {
  store::EventInput e;
  e.user_id = "member-0017";
  e.item_id = "tool/hedge-trimmer-3";
  e.timestamp_ms = 1'700'000'000'000;
  e.event_id = "loan-88121";
  e.weight = 2.5f;
  return e;
}

RejectReason Reject(store::EventInput e, std::string* detail = nullptr) {
  EventRejection why;
  EXPECT_FALSE(ValidateEvent(&e, kNow, &why));
  if (detail) *detail = why.detail;
  return why.reason;
}

TEST(EventValidation, AcceptsAGoodEventUnchanged) {
  store::EventInput e = Good();
  EventRejection why;
  ASSERT_TRUE(ValidateEvent(&e, kNow, &why));
  EXPECT_EQ(e.user_id, "member-0017");
  EXPECT_EQ(e.timestamp_ms, 1'700'000'000'000);
  EXPECT_EQ(e.weight, 2.5f);
}

TEST(EventValidation, ZeroWeightMeansOneAndZeroTimeMeansReceived) {
  store::EventInput e = Good();
  e.weight = 0.0f;
  e.timestamp_ms = 0;
  EventRejection why;
  ASSERT_TRUE(ValidateEvent(&e, 4242, &why));
  EXPECT_EQ(e.weight, 1.0f);
  EXPECT_EQ(e.timestamp_ms, 4242);
}

TEST(EventValidation, BoundariesAreInclusiveWhereTheContractSaysSo) {
  store::EventInput e = Good();
  e.user_id.assign(kMaxIdBytes, 'u');  // exactly 256 bytes: allowed
  e.item_id.assign(kMaxIdBytes, 'i');
  e.event_id.assign(kMaxEventIdBytes, 'e');  // exactly 128 bytes: allowed
  e.weight = 1000.0f;                        // (0, 1000]: 1000 is in
  EventRejection why;
  EXPECT_TRUE(ValidateEvent(&e, kNow, &why)) << why.detail;
  e = Good();
  e.weight = std::numeric_limits<float>::denorm_min();  // smallest positive: in
  EXPECT_TRUE(ValidateEvent(&e, kNow, &why)) << why.detail;
  e = Good();
  e.user_id = "Zoë’s ladder";  // multi-byte UTF-8 is fine
  EXPECT_TRUE(ValidateEvent(&e, kNow, &why)) << why.detail;
}

TEST(EventValidation, RejectsEmptyIds) {
  store::EventInput e = Good();
  e.user_id.clear();
  EXPECT_EQ(Reject(e), RejectReason::kEmptyUserId);
  e = Good();
  e.item_id.clear();
  EXPECT_EQ(Reject(e), RejectReason::kEmptyItemId);
}

TEST(EventValidation, RejectsOverlongIdsWithTheSizeInTheDetail) {
  store::EventInput e = Good();
  e.user_id.assign(300, 'u');
  std::string detail;
  EXPECT_EQ(Reject(e, &detail), RejectReason::kIdTooLong);
  EXPECT_EQ(detail, "user_id is 300 bytes; the limit is 256");
  e = Good();
  e.item_id.assign(kMaxIdBytes + 1, 'i');
  EXPECT_EQ(Reject(e), RejectReason::kIdTooLong);
}

TEST(EventValidation, RejectsControlCharactersInIds) {
  store::EventInput e = Good();
  e.user_id = "member\n17";
  std::string detail;
  EXPECT_EQ(Reject(e, &detail), RejectReason::kBadId);
  EXPECT_EQ(detail, "user_id holds control character 0x0a at byte 6");
  e = Good();
  e.item_id = std::string("drill\0bit", 9);
  EXPECT_EQ(Reject(e), RejectReason::kBadId);
  e = Good();
  e.item_id = "saw\x7f";
  EXPECT_EQ(Reject(e), RejectReason::kBadId);
}

TEST(EventValidation, RejectsBadWeights) {
  for (float w :
       {-1.0f, -0.001f, 1000.5f, 1e30f, std::numeric_limits<float>::infinity(),
        -std::numeric_limits<float>::infinity(), std::numeric_limits<float>::quiet_NaN()}) {
    store::EventInput e = Good();
    e.weight = w;
    EXPECT_EQ(Reject(e), RejectReason::kBadWeight) << w;
  }
}

TEST(EventValidation, RejectsNegativeTimestamps) {
  store::EventInput e = Good();
  e.timestamp_ms = -1;
  EXPECT_EQ(Reject(e), RejectReason::kBadTimestamp);
}

// Year 3000 and int64 max were accepted before; the receive time here is 2023-11-14.
TEST(EventValidation, RejectsTimestampsBeyondTheAllowedSkewWithTheirOwnReason) {
  constexpr int64_t kReceived = 1'700'000'000'000;
  constexpr int64_t kYear3000 = 32'503'680'000'000;  // 3000-01-01T00:00:00Z in ms
  for (int64_t ts :
       {kYear3000, std::numeric_limits<int64_t>::max(), kReceived + kDefaultMaxFutureSkewMs + 1}) {
    store::EventInput e = Good();
    e.timestamp_ms = ts;
    EventRejection why;
    EXPECT_FALSE(ValidateEvent(&e, kReceived, &why)) << ts;
    EXPECT_EQ(why.reason, RejectReason::kFutureTimestamp) << ts;
    EXPECT_NE(why.detail.find("3600 s ahead"), std::string::npos) << why.detail;
  }
  // Up to the skew is fine, and so is any past time; a configured skew replaces the default.
  store::EventInput e = Good();
  e.timestamp_ms = kReceived + kDefaultMaxFutureSkewMs;
  EventRejection why;
  EXPECT_TRUE(ValidateEvent(&e, kReceived, &why)) << why.detail;
  e.timestamp_ms = kReceived + 61'000;
  EXPECT_FALSE(ValidateEvent(&e, kReceived, &why, /*max_future_skew_ms=*/60'000));
  EXPECT_EQ(why.reason, RejectReason::kFutureTimestamp);
  e.timestamp_ms = kYear3000;
  EXPECT_TRUE(ValidateEvent(&e, kReceived, &why, /*max_future_skew_ms=*/0));  // no limit
}

TEST(EventValidation, RejectsBadEventIds) {
  store::EventInput e = Good();
  e.event_id.assign(kMaxEventIdBytes + 1, 'e');
  EXPECT_EQ(Reject(e), RejectReason::kBadEventId);
  e = Good();
  e.event_id = "loan\t1";
  EXPECT_EQ(Reject(e), RejectReason::kBadEventId);
  e = Good();
  e.event_id.clear();  // no event_id: allowed, no de-duplication
  EventRejection why;
  EXPECT_TRUE(ValidateEvent(&e, kNow, &why));
}

TEST(EventValidation, ReasonLabelsAreTheAgreedMetricLabels) {
  // Labels of plumb_events_rejected_total as agreed in the project's metric list.
  EXPECT_EQ(RejectReasonLabel(RejectReason::kEmptyUserId), "empty_user_id");
  EXPECT_EQ(RejectReasonLabel(RejectReason::kEmptyItemId), "empty_item_id");
  EXPECT_EQ(RejectReasonLabel(RejectReason::kIdTooLong), "id_too_long");
  EXPECT_EQ(RejectReasonLabel(RejectReason::kBadWeight), "bad_weight");
  EXPECT_EQ(RejectReasonLabel(RejectReason::kBadTimestamp), "bad_timestamp");
  EXPECT_EQ(RejectReasonLabel(RejectReason::kBadEventId), "bad_event_id");
  EXPECT_EQ(RejectReasonLabel(RejectReason::kBadId), "bad_id");
  EXPECT_EQ(RejectReasonLabel(RejectReason::kFutureTimestamp), "future_timestamp");
}

}  // namespace
}  // namespace plumb::online
