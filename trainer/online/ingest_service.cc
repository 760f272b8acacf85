#include "trainer/online/ingest_service.h"

#include <algorithm>
#include <chrono>
#include <deque>
#include <future>
#include <string>
#include <utility>
#include <vector>

#include "core/clock.h"
#include "rpc/grpc_status.h"
#include "trainer/online/event_validation.h"

namespace plumb::online {
namespace {

plumb::v1::RejectReason WireRejectReason(RejectReason reason) {
  switch (reason) {
    case RejectReason::kEmptyUserId:
      return plumb::v1::REJECT_EMPTY_USER_ID;
    case RejectReason::kEmptyItemId:
      return plumb::v1::REJECT_EMPTY_ITEM_ID;
    case RejectReason::kIdTooLong:
      return plumb::v1::REJECT_ID_TOO_LONG;
    case RejectReason::kBadWeight:
      return plumb::v1::REJECT_BAD_WEIGHT;
    case RejectReason::kBadTimestamp:
      return plumb::v1::REJECT_BAD_TIMESTAMP;
    case RejectReason::kBadEventId:
      return plumb::v1::REJECT_BAD_EVENT_ID;
    case RejectReason::kBadId:
      return plumb::v1::REJECT_BAD_ID;
    case RejectReason::kFutureTimestamp:
      return plumb::v1::REJECT_FUTURE_TIMESTAMP;
  }
  return plumb::v1::REJECT_REASON_UNSPECIFIED;
}

}  // namespace

grpc::Status AppendErrorToGrpc(const Status& status) {
  // The store says what failed by its code (a full disk is ResourceExhausted, a bad event
  // InvalidArgument); rpc/grpc_status maps codes for every service.
  return grpc::Status(rpc::ToGrpcCode(status.code()),
                      "the event log could not be written (" + status.ToString() +
                          "); this call acknowledges nothing: resend its events with the "
                          "same event_ids");
}

// The state of one Publish or PublishBatch call: validates events as they come, submits
// them in chunks without waiting, and settles all chunks before the summary is written.
class IngestService::Call {
 public:
  Call(const IngestService& service, plumb::v1::PublishSummary* summary)
      : service_(service), summary_(summary) {
    chunk_.reserve(service_.limits_.chunk_events);
  }

  // Takes one event (moved from `wire`); `index` is its position in the call.
  void Add(plumb::v1::InteractionEvent* wire, uint64_t index, int64_t received_ms) {
    store::EventInput event;
    event.user_id = std::move(*wire->mutable_user_id());
    event.item_id = std::move(*wire->mutable_item_id());
    event.event_id = std::move(*wire->mutable_event_id());
    event.timestamp_ms = wire->timestamp_ms();
    event.weight = wire->weight();
    EventRejection why;
    if (!ValidateEvent(&event, received_ms, &why, service_.limits_.max_future_skew_ms)) {
      Reject(index, why, std::move(event.event_id));
      return;
    }
    chunk_.push_back(std::move(event));
    if (chunk_.size() >= service_.limits_.chunk_events) SubmitChunk();
  }

  // False once a chunk has failed: the caller should stop reading.
  bool healthy() {
    // Collect finished chunks without blocking so that a failure is seen early.
    while (!in_flight_.empty() &&
           in_flight_.front().wait_for(std::chrono::seconds(0)) == std::future_status::ready) {
      Settle();
    }
    return error_.ok();
  }

  // Submits what is left, waits for every chunk, and completes the summary. Returns the
  // call's status: OK only if every accepted event is durable.
  grpc::Status Finish() {
    if (error_.ok() && !chunk_.empty()) SubmitChunk();
    while (!in_flight_.empty()) Settle();
    if (!error_.ok()) return AppendErrorToGrpc(error_);
    summary_->set_accepted(accepted_);
    summary_->set_duplicates(duplicates_);
    summary_->set_last_sequence(any_committed_ ? last_seq_ : service_.committer_->LastSequence());
    return grpc::Status::OK;
  }

 private:
  void Reject(uint64_t index, const EventRejection& why, std::string event_id) {
    summary_->set_rejected(summary_->rejected() + 1);
    if (static_cast<size_t>(summary_->rejections_size()) < service_.limits_.max_listed_rejections) {
      plumb::v1::Rejection* r = summary_->add_rejections();
      r->set_index(index);
      r->set_reason(WireRejectReason(why.reason));
      r->set_detail(why.detail);
      // An over-long event_id is listed as received; it is at most one message long.
      r->set_event_id(std::move(event_id));
    }
    service_.metrics_->CountRejected(why.reason);
  }

  void SubmitChunk() {
    in_flight_.push_back(service_.committer_->Submit(std::move(chunk_)));
    chunk_ = {};
    chunk_.reserve(service_.limits_.chunk_events);
    while (in_flight_.size() > service_.limits_.max_chunks_in_flight) Settle();
  }

  // Waits for the oldest chunk and folds its outcome in.
  void Settle() {
    CommitOutcome outcome = in_flight_.front().get();
    in_flight_.pop_front();
    if (!outcome.status.ok()) {
      if (error_.ok()) error_ = outcome.status;
      return;
    }
    accepted_ += outcome.appended;
    duplicates_ += outcome.duplicates;
    last_seq_ = std::max(last_seq_, outcome.last_seq);
    any_committed_ = true;
  }

  const IngestService& service_;
  plumb::v1::PublishSummary* const summary_;
  std::vector<store::EventInput> chunk_;
  std::deque<std::future<CommitOutcome>> in_flight_;
  Status error_;
  uint64_t accepted_ = 0;
  uint64_t duplicates_ = 0;
  uint64_t last_seq_ = 0;
  bool any_committed_ = false;
};

IngestService::IngestService(GroupCommitter* committer, TrainMetrics* metrics,
                             const CallAdmission& admission, const IngestLimits& limits)
    : committer_(committer), metrics_(metrics), admission_(admission), limits_(limits) {
  // Messages are decoded by plumb, not gRPC: see rpc/checked_methods.h.
  auto observer = [this](const char* method) {
    return [this, method](const grpc::Status& status, bool undecodable, double) {
      if (undecodable) metrics_->CountUndecodable(method);
      metrics_->CountCall(method, rpc::GrpcCodeName(status.error_code()));
    };
  };
  const std::string service = plumb::v1::EventIngest::service_full_name();
  MarkMethodStreamed(
      rpc::MethodIndex(service, "Publish"),
      rpc::CheckedClientStream<plumb::v1::InteractionEvent, plumb::v1::PublishSummary>(
          [this](grpc::ServerContext* context,
                 rpc::MessageReader<plumb::v1::InteractionEvent>* reader,
                 plumb::v1::PublishSummary* summary) {
            return PublishStream(context, reader, summary);
          },
          observer("Publish")));
  MarkMethodStreamed(
      rpc::MethodIndex(service, "PublishBatch"),
      rpc::CheckedUnary<plumb::v1::PublishBatchRequest, plumb::v1::PublishSummary>(
          [this](grpc::ServerContext* context, const plumb::v1::PublishBatchRequest* request,
                 plumb::v1::PublishSummary* summary) {
            return PublishBatch(context, request, summary);
          },
          observer("PublishBatch")));
}

grpc::Status IngestService::PublishStream(grpc::ServerContext* context,
                                          rpc::MessageReader<plumb::v1::InteractionEvent>* reader,
                                          plumb::v1::PublishSummary* summary) {
  using Read = rpc::MessageReader<plumb::v1::InteractionEvent>::Result;
  InflightCalls::Scope scope;
  if (grpc::Status s = Admit(admission_, *context, &scope); !s.ok()) return s;
  Call call(*this, summary);
  plumb::v1::InteractionEvent wire;
  uint64_t index = 0;
  Read result;
  while ((result = reader->Read(&wire)) == Read::kMessage) {
    call.Add(&wire, index++, NowMs());
    // Checking every event would cost a clock read per event; once per chunk suffices.
    if (index % limits_.chunk_events == 0 && !call.healthy()) break;
  }
  grpc::Status status = call.Finish();
  if (result == Read::kUndecodable) {
    // What came before the bad message is stored (or failed above); say so, so that the
    // client knows a resend is safe and where the stream broke.
    const std::string stored =
        status.ok()
            ? std::to_string(summary->accepted()) + " of the " + std::to_string(index) +
                  " events before it were appended (" + std::to_string(summary->duplicates()) +
                  " duplicates, " + std::to_string(summary->rejected()) + " rejected)"
            : "the events before it could not all be stored (" + status.error_message() + ")";
    return grpc::Status(grpc::StatusCode::INVALID_ARGUMENT,
                        "stream message " + std::to_string(index) +
                            " cannot be decoded: " + reader->error().message() + ". " + stored +
                            "; nothing after it was read. Fix the message and resend the "
                            "stream with the same event_ids (stored events come back as "
                            "duplicates)");
  }
  if (status.ok() && context->IsCancelled()) {
    // The stream broke off before the client closed it: the client will not see this
    // summary and resends; what was stored comes back as duplicates then.
    return grpc::Status(grpc::StatusCode::CANCELLED, "the stream was cancelled");
  }
  return status;
}

grpc::Status IngestService::PublishBatch(grpc::ServerContext* context,
                                         const plumb::v1::PublishBatchRequest* request,
                                         plumb::v1::PublishSummary* summary) {
  InflightCalls::Scope scope;
  if (grpc::Status s = Admit(admission_, *context, &scope); !s.ok()) return s;
  const size_t n = static_cast<size_t>(request->events_size());
  if (n > limits_.max_batch_events) {
    return grpc::Status(grpc::StatusCode::INVALID_ARGUMENT,
                        "the batch holds " + std::to_string(n) + " events; the limit is " +
                            std::to_string(limits_.max_batch_events) +
                            " (split it, or use the Publish stream)");
  }
  Call call(*this, summary);
  const int64_t received_ms = NowMs();
  plumb::v1::InteractionEvent wire;
  for (size_t i = 0; i < n; ++i) {
    wire = request->events(static_cast<int>(i));
    call.Add(&wire, i, received_ms);
  }
  return call.Finish();
}

}  // namespace plumb::online
