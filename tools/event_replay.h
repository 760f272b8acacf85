// EventReplay: feeds a history file into plumb-train's EventIngest in file order, the way
// the demo loads its invented borrowing history and an operator back-fills events.
//
// The file is the one `plumb fit --events` reads (`user,item[,ts][,weight][,event_id]` with
// a header; see cli/csv_reader.h). It is read and checked completely before the first
// event is sent, so a malformed file sends nothing. Events without an event_id get one made
// from the file's content and line, "<prefix>:<line>", where the prefix defaults to a hash
// of the whole file: replaying the same file again (after an interruption, say) is
// recognised as duplicates by the trainer, while a different file never collides with it.
#pragma once

#include <grpcpp/channel.h>

#include <cstdint>
#include <iosfwd>
#include <memory>
#include <string>
#include <vector>

#include "core/status.h"

namespace plumb::tools {

struct ReplayOptions {
  std::string events_file;
  double events_per_second = 0;  // 0: as fast as the trainer acknowledges
  uint32_t batch = 1000;         // events per PublishBatch call, or per Publish stream
  bool stream = false;           // client-streaming Publish instead of PublishBatch
  std::string id_prefix;         // empty: "f" + 16 hex digits of the file's FNV-1a hash
  // Calls failing with UNAVAILABLE, RESOURCE_EXHAUSTED, DEADLINE_EXCEEDED or ABORTED are
  // sent again (same event ids, so nothing is appended twice) up to this many times each,
  // with backoff from 100 ms doubling to 2 s.
  uint32_t retries = 8;
  // How long to wait for the trainer to become reachable before the first call.
  int connect_timeout_ms = 30000;
  // Per call. A call waits (within it) for a trainer that went away to come back.
  int deadline_ms = 30000;
  std::string bearer_token;
};

struct ReplaySummary {
  uint64_t events = 0;  // events in the file
  uint64_t sent = 0;    // events whose call was acknowledged
  uint64_t accepted = 0;
  uint64_t duplicates = 0;
  uint64_t rejected = 0;
  uint64_t calls = 0;
  uint64_t retried = 0;  // calls sent again after a transient failure
  uint64_t last_sequence = 0;
  double seconds = 0;     // from the first call to the last acknowledgement
  std::string id_prefix;  // the prefix used for generated event ids
  // "file:line: REASON: detail" for the first rejected events (at most 20).
  std::vector<std::string> rejections;
  // Likely mistakes in the file that did not stop the replay (e.g. every ts in seconds).
  std::vector<std::string> warnings;
};

// Replays options.events_file through `channel`. Progress lines go to `progress` (may be
// null) about once a second. Errors: NotFound / InvalidArgument for the file (nothing
// sent); Unavailable when the trainer stays unreachable past the retries, or the gRPC
// status (as InvalidArgument or FailedPrecondition with its code name in the message) for
// a call the trainer refuses. `summary` holds what was acknowledged before any error:
// every event before the failed call is durable, so the file can be replayed again.
Status ReplayEvents(std::shared_ptr<grpc::Channel> channel, const ReplayOptions& options,
                    std::ostream* progress, ReplaySummary* summary);

}  // namespace plumb::tools
