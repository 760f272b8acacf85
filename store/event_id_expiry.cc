#include "store/event_id_expiry.h"

#include <chrono>

#include "store/keys.h"

namespace plumb::store {

bool EventIdExpiry::Filter(int /*level*/, const rocksdb::Slice& /*key*/,
                           const rocksdb::Slice& existing_value, std::string* /*new_value*/,
                           bool* /*value_changed*/) const {
  uint64_t seq = 0;
  int64_t received_ms = 0;
  // An unreadable record is kept: deleting it would hide the damage, and AppendEvents
  // reports it as Corruption when the same event id arrives again.
  if (!keys::ParseEventIdRecord(std::string_view(existing_value.data(), existing_value.size()),
                                &seq, &received_ms)) {
    return false;
  }
  const int64_t now_ms = std::chrono::duration_cast<std::chrono::milliseconds>(
                             std::chrono::system_clock::now().time_since_epoch())
                             .count();
  return !keys::WithinDedupWindow(received_ms, now_ms, window_ms_);
}

}  // namespace plumb::store
