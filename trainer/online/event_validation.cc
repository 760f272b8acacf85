#include "trainer/online/event_validation.h"

#include <cmath>
#include <cstdio>

namespace plumb::online {
namespace {

// Position of the first C0 control character or DEL in `s`, or npos. Bytes >= 0x80 are
// left alone: they belong to multi-byte UTF-8 sequences, whose well-formedness protobuf
// already checks when it parses a proto3 string field. (C1 controls U+0080..U+009F are
// allowed; they are rare and harmless as map keys.)
size_t FindControl(std::string_view s) {
  for (size_t i = 0; i < s.size(); ++i) {
    const unsigned char c = static_cast<unsigned char>(s[i]);
    if (c < 0x20 || c == 0x7f) return i;
  }
  return std::string_view::npos;
}

std::string ControlDetail(std::string_view field, std::string_view value, size_t at) {
  char buf[128];
  std::snprintf(buf, sizeof buf, "%.*s holds control character 0x%02x at byte %zu",
                static_cast<int>(field.size()), field.data(),
                static_cast<unsigned>(static_cast<unsigned char>(value[at])), at);
  return buf;
}

bool CheckId(std::string_view field, std::string_view value, RejectReason empty_reason,
             EventRejection* why) {
  if (value.empty()) {
    why->reason = empty_reason;
    why->detail = std::string(field) + " is empty";
    return false;
  }
  if (value.size() > kMaxIdBytes) {
    why->reason = RejectReason::kIdTooLong;
    why->detail = std::string(field) + " is " + std::to_string(value.size()) +
                  " bytes; the limit is " + std::to_string(kMaxIdBytes);
    return false;
  }
  if (size_t at = FindControl(value); at != std::string_view::npos) {
    why->reason = RejectReason::kBadId;
    why->detail = ControlDetail(field, value, at);
    return false;
  }
  return true;
}

}  // namespace

std::string_view RejectReasonLabel(RejectReason reason) {
  switch (reason) {
    case RejectReason::kEmptyUserId:
      return "empty_user_id";
    case RejectReason::kEmptyItemId:
      return "empty_item_id";
    case RejectReason::kIdTooLong:
      return "id_too_long";
    case RejectReason::kBadId:
      return "bad_id";
    case RejectReason::kBadWeight:
      return "bad_weight";
    case RejectReason::kBadTimestamp:
      return "bad_timestamp";
    case RejectReason::kBadEventId:
      return "bad_event_id";
    case RejectReason::kFutureTimestamp:
      return "future_timestamp";
  }
  return "unknown";
}

bool ValidateEvent(store::EventInput* event, int64_t received_ms, EventRejection* why,
                   int64_t max_future_skew_ms) {
  if (!CheckId("user_id", event->user_id, RejectReason::kEmptyUserId, why)) return false;
  if (!CheckId("item_id", event->item_id, RejectReason::kEmptyItemId, why)) return false;

  // An empty event_id means "none": the event is appended without de-duplication.
  if (event->event_id.size() > kMaxEventIdBytes) {
    why->reason = RejectReason::kBadEventId;
    why->detail = "event_id is " + std::to_string(event->event_id.size()) +
                  " bytes; the limit is " + std::to_string(kMaxEventIdBytes);
    return false;
  }
  if (size_t at = FindControl(event->event_id); at != std::string_view::npos) {
    why->reason = RejectReason::kBadEventId;
    why->detail = ControlDetail("event_id", event->event_id, at);
    return false;
  }

  const float w = event->weight;
  if (w == 0.0f) {
    event->weight = 1.0f;  // proto3 cannot tell "missing" from 0: both mean the default
  } else if (!std::isfinite(w) || w < 0.0f || w > kMaxWeight) {
    char buf[96];
    std::snprintf(buf, sizeof buf, "weight %g is outside (0, %g]", static_cast<double>(w),
                  static_cast<double>(kMaxWeight));
    why->reason = RejectReason::kBadWeight;
    why->detail = buf;
    return false;
  }

  if (event->timestamp_ms < 0) {
    why->reason = RejectReason::kBadTimestamp;
    why->detail = "timestamp_ms " + std::to_string(event->timestamp_ms) + " is negative";
    return false;
  }
  // Both are non-negative here, so the difference cannot overflow.
  if (max_future_skew_ms > 0 && event->timestamp_ms > received_ms &&
      event->timestamp_ms - received_ms > max_future_skew_ms) {
    why->reason = RejectReason::kFutureTimestamp;
    why->detail = "timestamp_ms " + std::to_string(event->timestamp_ms) + " is " +
                  std::to_string((event->timestamp_ms - received_ms) / 1000) +
                  " s after its receipt; at most " + std::to_string(max_future_skew_ms / 1000) +
                  " s ahead is accepted (max_future_skew)";
    return false;
  }
  if (event->timestamp_ms == 0) event->timestamp_ms = received_ms;
  return true;
}

}  // namespace plumb::online
