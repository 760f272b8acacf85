// JetStreamSource: plumb-train's events from a NATS JetStream stream (EventSource).
//
// A durable pull consumer (options.consumer) on options.stream, filtered to options.subject,
// is created if missing and otherwise resumed where it stopped; with options.create_replicas
// the stream too is created when missing. Each message carries one
// plumb.v1.InteractionEvent (protobuf encoding) or, with the header `Plumb-Payload: batch`, a
// plumb.v1.PublishBatchRequest (`Plumb-Payload: event`, or no such header, is one event).
//
// Event ids: an event without an event_id gets the message's JetStream id, the header
// Nats-Msg-Id (or "<stream>/<stream sequence>" when the publisher set none); the events of a
// batch get that id plus "/<index>". So a message delivered twice, or published twice with
// the same Nats-Msg-Id, is stored once: the event log de-duplicates by event_id exactly as
// for gRPC resends (within dedup_window).
//
// Acknowledgement: a message is acked only after the group commit that carried its events
// returned OK (the events are durable in the log); when the write fails the message is
// nak'ed with a delay and comes back. A message that can never be stored is terminated
// (AckTerm: JetStream does not redeliver it) and counted in
// plumb_jetstream_messages_terminated_total{reason}:
//   oversized        more than options.max_message_bytes of payload
//   undecodable      not a protobuf encoding of the type, or a string field not UTF-8
//   wrong_type       fields the type does not have (another message type, a newer producer)
//                    or an unknown Plumb-Payload header
//   too_many_events  a batch of more than options.max_message_events events
//   no_valid_event   every event of the message failed validation (those are also counted
//                    in plumb_events_rejected_total{reason}, as for gRPC ingest)
// A message with some valid events stores them, counts the others as rejected, and is acked.
//
// Connection: every URL of options.access.servers is tried; the client reconnects by itself and
// the source resubscribes after a failure, logging once per episode. Messages are pulled
// in batches (options.fetch_batch), with up to options.max_pulls_in_flight batches being
// written while the next is fetched.
//
// Thread safety: Start and Stop from one thread (see EventSource).
#pragma once

#include <atomic>
#include <cstdint>
#include <memory>
#include <string>
#include <thread>
#include <vector>

#include "replica/nats_access.h"
#include "trainer/online/event_source.h"
#include "trainer/online/event_validation.h"
#include "trainer/online/group_commit.h"
#include "trainer/online/train_metrics.h"

namespace plumb::online {

struct JetStreamOptions {
  replica::NatsAccess access;  // the servers (at least one), token or credentials, TLS
  std::string stream = "PLUMB_EVENTS";
  std::string subject = "plumb.events";  // the consumer's filter subject
  std::string consumer = "plumb-train";  // durable consumer name
  int fetch_batch = 1000;                // messages per pull
  int max_pulls_in_flight = 4;           // pulled batches being written at once
  size_t max_message_bytes = 1 << 20;    // larger payloads are terminated (oversized)
  size_t max_message_events = 10000;     // larger batches are terminated (too_many_events)
  int64_t ack_wait_ms = 30000;           // the consumer's AckWait: redelivery of unacked
  int create_replicas = 0;  // > 0: create a missing stream (file storage, this many replicas)
  int64_t max_future_skew_ms = kDefaultMaxFutureSkewMs;  // as for gRPC ingest
};

// Why a message was terminated; the metric label is the name in the list above.
enum class TerminateReason { kOversized, kUndecodable, kWrongType, kTooManyEvents, kNoValidEvent };
inline constexpr int kNumTerminateReasons = 5;
const char* TerminateReasonLabel(TerminateReason reason);

class JetStreamSource final : public EventSource {
 public:
  // `committer` and `metrics` must outlive the source. The source's own metrics
  // (plumb_jetstream_*) are added to metrics->registry() here.
  JetStreamSource(const JetStreamOptions& options, GroupCommitter* committer,
                  TrainMetrics* metrics);
  ~JetStreamSource() override;  // Stop()

  // InvalidArgument when the options are unusable (no server, an unreadable token file,
  // TLS files that do not load, a TLS certificate without its key; see
  // replica::MakeNatsOptions); otherwise starts the consumer thread and returns OK even
  // when no server answers yet.
  Status Start() override;
  void Stop() override;
  std::string Describe() const override;

  // Totals since construction, for tests and the shutdown log line.
  uint64_t acked() const;
  uint64_t terminated(TerminateReason reason) const;

 private:
  struct Impl;
  std::unique_ptr<Impl> impl_;
};

}  // namespace plumb::online
