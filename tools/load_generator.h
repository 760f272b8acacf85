// LoadGenerator: drives plumb-serve with Recommend, SimilarItems or health-check calls from
// one or two completion-queue threads and measures what a client sees.
#pragma once

#include <grpcpp/channel.h>

#include <cstdint>
#include <map>
#include <memory>
#include <string>
#include <vector>

#include "core/status.h"
#include "tools/latency_record.h"

namespace plumb::tools {

enum class LoadRpc {
  kRecommend,  // plumb.v1.Ranker/Recommend for a drawn user
  kSimilar,    // plumb.v1.Ranker/SimilarItems for a drawn item
  kHealth,     // grpc.health.v1.Health/Check: the empty-RPC floor of the same transport
};

// "recommend", "similar", "health".
const char* LoadRpcName(LoadRpc rpc);

struct LoadOptions {
  LoadRpc rpc = LoadRpc::kRecommend;
  // Open loop when rate > 0 (calls started per second, in total); otherwise closed loop
  // with `concurrency` calls in flight.
  double rate = 0;
  uint32_t concurrency = 8;
  double warmup_seconds = 1;         // calls are made but not counted
  double duration_seconds = 10;      // the measured window
  uint32_t threads = 1;              // completion-queue threads; closed loop uses <= concurrency
  uint32_t max_outstanding = 10000;  // open loop: calls in flight at most
  int deadline_ms = 1000;
  // Recommend / SimilarItems fields.
  uint32_t count = 10;
  bool exclude_seen = true;  // the wire's default; --include-seen turns it off
  // Which ids the calls name: rank r of a seeded permutation with weight 1/r^zipf_s.
  double zipf_s = 1.0;
  uint64_t seed = 1;
  std::string health_service;  // "" = the server as a whole
  std::string bearer_token;    // plumb-serve's token; empty: no authorization metadata
  size_t max_samples = size_t{1} << 24;
};

struct CallTally {
  uint64_t ok = 0;
  uint64_t failed = 0;
  std::map<std::string, uint64_t> errors_by_code;  // code name -> calls
  std::map<std::string, std::string> first_error;  // code name -> first message seen
  LatencySummary latency;                          // OK calls only

  void AddError(const std::string& code, const std::string& message);
};

struct LoadResult {
  double seconds = 0;    // length of the measured window
  uint64_t started = 0;  // calls started in the whole run, warm-up included
  uint64_t delayed = 0;  // open loop: calls held back by max_outstanding
  // Open loop: how late calls started after their slots (of the thread with the worst p99
  // when there are several). Latencies include this; a start-lag p99 near the latency p99
  // means the generator, not the server, set the tail.
  LatencySummary start_lag;
  CallTally calls;  // calls scheduled inside the measured window
  double calls_per_second() const {
    return seconds > 0 ? static_cast<double>(calls.ok + calls.failed) / seconds : 0;
  }
};

class LoadGenerator {
 public:
  // `channels`: one or more channels to plumb-serve; calls go round-robin over them.
  // `ids`: users for kRecommend, items for kSimilar (unused for kHealth). Both must outlive
  // the generator.
  LoadGenerator(std::vector<std::shared_ptr<grpc::Channel>> channels,
                const std::vector<std::string>* ids, const LoadOptions& options);

  // Runs warm-up and measured window on options.threads threads and blocks until the last
  // call has finished. InvalidArgument for inconsistent options (no ids for a call that
  // needs them, a zero duration). Call once.
  Status Run(LoadResult* result);

 private:
  std::vector<std::shared_ptr<grpc::Channel>> channels_;
  const std::vector<std::string>* ids_;
  LoadOptions options_;
};

}  // namespace plumb::tools
