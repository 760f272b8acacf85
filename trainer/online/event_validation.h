// Validation of incoming interaction events, before anything touches the event log.
//
// The limits are the wire contract of plumb.v1.InteractionEvent (proto/plumb/v1/ingest.proto):
// user and item ids 1..256 bytes without control characters, an optional event_id of at most
// 128 bytes, a weight in (0, 1000] (0 meaning 1) and a timestamp >= 0 (0 meaning "when
// received") and not later than the receive time plus a configured skew (default 1 h). A rejected
// event is reported with a reason and a human-readable detail; it never stops the events that
// follow it.
//
// Thread safety: the functions here are pure and may be called from any thread.
#pragma once

#include <cstdint>
#include <string>
#include <string_view>

#include "store/store.h"

namespace plumb::online {

inline constexpr size_t kMaxIdBytes = 256;
inline constexpr size_t kMaxEventIdBytes = 128;
inline constexpr float kMaxWeight = 1000.0f;

// Why an event was refused. Each value has a wire counterpart (plumb.v1.RejectReason) and
// a metric label (plumb_events_rejected_total{reason=...}).
enum class RejectReason {
  kEmptyUserId,
  kEmptyItemId,
  kIdTooLong,
  // A user or item id holding a control character. The wire enum has no value of its own
  // for this yet; see WireRejectReason in ingest_service.cc.
  kBadId,
  kBadWeight,
  kBadTimestamp,
  kBadEventId,
  // A timestamp later than the receive time plus the allowed clock skew (a year-3000
  // timestamp, int64 max, a clock or time-zone bug).
  kFutureTimestamp,
};
inline constexpr int kNumRejectReasons = 8;

// How far ahead of the receive time a timestamp may be: client clocks drift and batches
// cross time zones, but an event cannot have happened an hour from now. Judgement, set by
// plumb-train's max_future_skew.
inline constexpr int64_t kDefaultMaxFutureSkewMs = 3600 * 1000;

// The metric label of a reason: "empty_user_id", "id_too_long", ...
std::string_view RejectReasonLabel(RejectReason reason);

struct EventRejection {
  RejectReason reason = RejectReason::kEmptyUserId;
  std::string detail;  // e.g. "user_id is 300 bytes; the limit is 256"
};

// Checks `event` as received and normalises it in place: weight 0 becomes 1, timestamp 0
// becomes `received_ms`. Returns true when the event is acceptable; otherwise fills `why`
// (the first problem found, checked in the order user_id, item_id, event_id, weight,
// timestamp) and leaves `event` in an unspecified but valid state. A timestamp more than
// `max_future_skew_ms` after `received_ms` is kFutureTimestamp; max_future_skew_ms <= 0
// turns that check off.
bool ValidateEvent(store::EventInput* event, int64_t received_ms, EventRejection* why,
                   int64_t max_future_skew_ms = kDefaultMaxFutureSkewMs);

}  // namespace plumb::online
