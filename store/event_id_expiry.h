// EventIdExpiry: a RocksDB compaction filter for the event_ids column family that drops
// de-duplication records older than the de-duplication window, so that the records cost
// disk only for as long as they can matter. Internal to store/.
#pragma once

#include <rocksdb/compaction_filter.h>

#include <cstdint>

namespace plumb::store {

class EventIdExpiry : public rocksdb::CompactionFilter {
 public:
  // window_ms > 0. A record whose first copy was received more than window_ms ago is
  // dropped at the next compaction that reaches it; AppendEvents ignores such records
  // anyway, so when exactly a compaction runs changes no result.
  explicit EventIdExpiry(int64_t window_ms) : window_ms_(window_ms) {}

  bool Filter(int level, const rocksdb::Slice& key, const rocksdb::Slice& existing_value,
              std::string* new_value, bool* value_changed) const override;

  const char* Name() const override { return "plumb.EventIdExpiry"; }

 private:
  int64_t window_ms_;
};

}  // namespace plumb::store
