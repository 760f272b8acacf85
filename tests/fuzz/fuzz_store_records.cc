// The storage record decoders: bytes read back from RocksDB are never trusted. Any value must
// decode to something the store could have written, or be refused with a reason; whatever
// decodes must encode back to a record that decodes to the same thing.
#include <cmath>
#include <cstdint>
#include <cstdlib>
#include <string>

#include "store/keys.h"
#include "store/records.h"
#include "store/store.h"
#include "tests/fuzz/fuzz_input.h"

namespace {

void Require(bool ok) {
  if (!ok) std::abort();
}

}  // namespace

extern "C" int LLVMFuzzerTestOneInput(const uint8_t* data, size_t size) {
  using namespace plumb::store;
  plumb::fuzz::FuzzInput in(data, size);
  const uint8_t which = in.Take<uint8_t>();
  const uint64_t number = in.Take<uint64_t>();
  const std::string_view bytes = in.Rest();
  std::string why;
  switch (which % 4) {
    case 0: {
      Event e;
      if (!records::DecodeEvent(bytes, number, &e, &why)) {
        Require(!why.empty());
        break;
      }
      Require(e.seq == number && !e.user_id.empty() && !e.item_id.empty() && e.received_ms > 0);
      Event again;
      Require(records::DecodeEvent(records::EncodeEvent(e, e.received_ms), number, &again, &why));
      Require(again.user_id == e.user_id && again.item_id == e.item_id &&
              again.timestamp_ms == e.timestamp_ms && again.event_id == e.event_id);
      break;
    }
    case 1: {
      VersionManifest m;
      uint32_t rows_per_block = 0;
      if (!records::DecodeManifest(bytes, number, &m, &rows_per_block, &why)) {
        Require(!why.empty());
        break;
      }
      Require(m.version == number && rows_per_block > 0);
      VersionManifest again;
      uint32_t rpb = 0;
      Require(records::DecodeManifest(records::EncodeManifest(m, rows_per_block), number, &again,
                                      &rpb, &why));
      Require(rpb == rows_per_block && again.num_users == m.num_users &&
              again.num_items == m.num_items && again.dim == m.dim);
      break;
    }
    case 2: {
      uint64_t seq = 0;
      int64_t received = 0;
      if (keys::ParseEventIdRecord(bytes, &seq, &received)) {
        Require(keys::EventIdRecord(seq, received) == bytes);
      }
      break;
    }
    default: {
      if (auto seq = keys::ParseEventKey(bytes)) Require(keys::EventKey(*seq) == bytes);
      if (auto v = keys::ParseManifestKey(bytes)) Require(keys::ManifestKey(*v) == bytes);
      if (auto v = keys::ParseFixed32(bytes)) Require(keys::Fixed32(*v) == bytes);
      if (auto v = keys::ParseFixed64(bytes)) Require(keys::Fixed64(*v) == bytes);
      break;
    }
  }
  return 0;
}
