// The ingest validator: a PublishBatch message of any content, each event normalised and
// checked as EventIngest does (receive time fixed, default skew). An accepted event must
// meet the wire contract of plumb.v1.InteractionEvent; a rejected one must say why.
#include <google/protobuf/stubs/logging.h>

#include <cmath>
#include <cstdint>
#include <cstdlib>

#include "plumb/v1/ingest.pb.h"
#include "trainer/online/event_validation.h"

namespace {

void Require(bool ok) {
  if (!ok) std::abort();
}

bool HasControl(const std::string& s) {
  for (unsigned char c : s) {
    if (c < 0x20 || c == 0x7f) return true;
  }
  return false;
}

}  // namespace

// Invalid UTF-8 in a string field is a parse failure the target sees; protobuf would also
// log each one, which only slows the fuzzer down.
extern "C" int LLVMFuzzerInitialize(int*, char***) {
  google::protobuf::SetLogHandler(nullptr);
  return 0;
}

extern "C" int LLVMFuzzerTestOneInput(const uint8_t* data, size_t size) {
  plumb::v1::PublishBatchRequest request;
  if (!request.ParseFromArray(data, static_cast<int>(size))) return 0;
  constexpr int64_t kReceived = 1'800'000'000'000;
  for (auto& wire : *request.mutable_events()) {
    plumb::store::EventInput e;
    e.user_id = wire.user_id();
    e.item_id = wire.item_id();
    e.event_id = wire.event_id();
    e.timestamp_ms = wire.timestamp_ms();
    e.weight = wire.weight();
    plumb::online::EventRejection why;
    if (!plumb::online::ValidateEvent(&e, kReceived, &why)) {
      Require(!why.detail.empty());
      Require(!plumb::online::RejectReasonLabel(why.reason).empty());
      continue;
    }
    Require(!e.user_id.empty() && e.user_id.size() <= plumb::online::kMaxIdBytes);
    Require(!e.item_id.empty() && e.item_id.size() <= plumb::online::kMaxIdBytes);
    Require(!HasControl(e.user_id) && !HasControl(e.item_id) && !HasControl(e.event_id));
    Require(e.event_id.size() <= plumb::online::kMaxEventIdBytes);
    Require(std::isfinite(e.weight) && e.weight > 0.0f && e.weight <= plumb::online::kMaxWeight);
    Require(e.timestamp_ms > 0 &&
            e.timestamp_ms <= kReceived + plumb::online::kDefaultMaxFutureSkewMs);
  }
  return 0;
}
