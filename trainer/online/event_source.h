// EventSource: a feed of interaction events into plumb-train other than its own gRPC ingest
// (IngestService), e.g. a stream on a message broker. A source takes events from outside,
// validates them (event_validation.h), hands them to the GroupCommitter, and acknowledges
// them to its upstream only after the committer reported them durable in the event log. It
// never touches the training loop: the committer wakes the loop as it does for gRPC ingest,
// and de-duplication by event_id is the log's, the same for every source.
//
// Lifecycle: construct, Start() once, Stop() once (also called by the destructor of an
// implementation). Thread safety: Start and Stop from one thread; the source runs its own
// threads in between.
#pragma once

#include <string>

#include "core/status.h"

namespace plumb::online {

class EventSource {
 public:
  virtual ~EventSource() = default;

  // Begins taking events in the background. An error here is a configuration error (a
  // credentials file that cannot be read, bad TLS files); an upstream that cannot be
  // reached yet is not an error: the source keeps trying and logs it.
  virtual Status Start() = 0;

  // Stops taking new events, waits for what was handed to the committer, acknowledges what
  // was stored, and returns. Call before GroupCommitter::Close(). Idempotent.
  virtual void Stop() = 0;

  // For logs: what the source reads, e.g. "JetStream stream EVENTS (consumer plumb-train)".
  virtual std::string Describe() const = 0;
};

}  // namespace plumb::online
