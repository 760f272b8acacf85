// IngestService: plumb.v1.EventIngest. Translates wire events into validated store events,
// hands them to the group committer and turns the commit outcomes into a PublishSummary.
// The summary is the acknowledgement: it is sent only after every accepted event of the
// call is durable, and a call whose events could not all be stored fails with
// UNAVAILABLE / RESOURCE_EXHAUSTED instead (the client resends with the same event_ids;
// what was stored meanwhile comes back as duplicates).
//
// Thread safety: the gRPC server calls the handlers from many threads at once.
#pragma once

#include <cstddef>
#include <cstdint>

#include "plumb/v1/ingest.grpc.pb.h"
#include "rpc/checked_methods.h"
#include "trainer/online/call_admission.h"
#include "trainer/online/group_commit.h"
#include "trainer/online/train_metrics.h"

namespace plumb::online {

struct IngestLimits {
  // PublishBatch refuses larger batches with INVALID_ARGUMENT (the wire contract says
  // 10000).
  size_t max_batch_events = 10000;
  // Publish hands events to the committer in chunks of this size.
  size_t chunk_events = 1000;
  // Publish keeps at most this many chunks in flight before waiting for the oldest (memory
  // bound per stream; the committer queue has its own global bound).
  size_t max_chunks_in_flight = 32;
  // Rejections listed in a summary (the count is not capped).
  size_t max_listed_rejections = 100;
  // Timestamps more than this after their receipt are rejected; <= 0: no limit.
  int64_t max_future_skew_ms = kDefaultMaxFutureSkewMs;
};

// Maps a failed append to the gRPC status the client sees, by its code through
// rpc/grpc_status.h: RESOURCE_EXHAUSTED when the disk is full, INVALID_ARGUMENT when the
// store refused the events themselves, UNAVAILABLE for I/O errors and shutdown, INTERNAL
// for a damaged store.
grpc::Status AppendErrorToGrpc(const Status& status);

class IngestService final : public plumb::v1::EventIngest::Service {
 public:
  // `committer` and `metrics` must outlive the service (and so must what `admission`
  // points to). Both methods decode their messages through rpc/checked_methods.h and count
  // every call in `metrics` (plumb_requests_total).
  IngestService(GroupCommitter* committer, TrainMetrics* metrics, const CallAdmission& admission,
                const IngestLimits& limits = IngestLimits());

  // The Publish stream. A message that cannot be decoded (e.g. invalid UTF-8 in a string
  // field) ends the call with INVALID_ARGUMENT naming the message's index and the field;
  // the events before it are stored (the message says how many; resending the stream with
  // the same event_ids is safe), nothing after it is read. Only the client's half-close
  // ends the stream with a summary.
  grpc::Status PublishStream(grpc::ServerContext* context,
                             rpc::MessageReader<plumb::v1::InteractionEvent>* reader,
                             plumb::v1::PublishSummary* summary);

  grpc::Status PublishBatch(grpc::ServerContext* context,
                            const plumb::v1::PublishBatchRequest* request,
                            plumb::v1::PublishSummary* summary) override;

 private:
  class Call;

  GroupCommitter* const committer_;
  TrainMetrics* const metrics_;
  const CallAdmission admission_;
  const IngestLimits limits_;
};

}  // namespace plumb::online
