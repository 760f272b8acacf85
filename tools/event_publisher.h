// EventPublisher: a stream of interaction events into plumb-train's EventIngest while a
// load run queries plumb-serve, to measure serving under training traffic. Events pair
// drawn users with uniformly drawn items and go out as PublishBatch calls on a fixed
// schedule (open loop) from one completion-queue thread.
#pragma once

#include <grpcpp/channel.h>

#include <cstdint>
#include <memory>
#include <string>
#include <vector>

#include "core/status.h"
#include "tools/call_pacer.h"
#include "tools/load_generator.h"

namespace plumb::tools {

struct PublishOptions {
  double events_per_second = 1000;  // > 0
  uint32_t batch = 100;             // events per PublishBatch call
  int deadline_ms = 5000;
  uint32_t max_outstanding = 64;  // batches in flight at most
  double zipf_s = 1.0;            // user draw, as in LoadOptions
  uint64_t seed = 2;
  // Give every event an event_id (so the trainer's de-duplication does its work, as for a
  // client that may resend). Ids are unique to this run.
  bool event_ids = false;
  std::string bearer_token;  // empty: no authorization metadata
};

struct PublishResult {
  double seconds = 0;         // how long the publisher ran
  uint64_t batches = 0;       // calls finished
  uint64_t events_sent = 0;   // events in finished calls
  uint64_t acknowledged = 0;  // accepted + duplicates, as the summaries say
  uint64_t accepted = 0;
  uint64_t duplicates = 0;
  uint64_t rejected = 0;
  uint64_t delayed = 0;  // batches held back by max_outstanding
  LatencySummary start_lag;  // how late batches started after their slots
  CallTally calls;       // per PublishBatch call; latency of OK calls
};

class EventPublisher {
 public:
  // `users` and `items` must be non-empty and outlive the publisher.
  EventPublisher(std::shared_ptr<grpc::Channel> channel, const std::vector<std::string>* users,
                 const std::vector<std::string>* items, const PublishOptions& options);

  // Publishes from `begin` until `end` on the calling thread, then waits for the batches in
  // flight. InvalidArgument for empty id lists or a non-positive rate. Call once.
  Status Run(LoadClock::time_point begin, LoadClock::time_point end, PublishResult* result);

 private:
  std::shared_ptr<grpc::Channel> channel_;
  const std::vector<std::string>* users_;
  const std::vector<std::string>* items_;
  PublishOptions options_;
};

}  // namespace plumb::tools
