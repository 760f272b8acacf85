#include "tools/load_generator.h"

#include <algorithm>
#include <atomic>
#include <mutex>
#include <random>
#include <thread>

#include "grpc/health/v1/health.grpc.pb.h"
#include "plumb/v1/ranker.grpc.pb.h"
#include "tools/call_pacer.h"
#include "tools/client_channel.h"
#include "tools/zipf_draw.h"

namespace plumb::tools {
namespace {

using grpc::health::v1::HealthCheckRequest;
using grpc::health::v1::HealthCheckResponse;

// A call of this generator. Problem() names a failure the status does not show (a health
// answer other than SERVING); empty when the answer is what was asked for.
struct QueryCall : PendingCall {
  virtual std::string Problem() const { return {}; }
};

template <typename Request, typename Response>
struct UnaryCall : QueryCall {
  Request request;
  Response response;
  std::unique_ptr<grpc::ClientAsyncResponseReader<Response>> reader;
};

struct HealthCall : UnaryCall<HealthCheckRequest, HealthCheckResponse> {
  std::string Problem() const override {
    if (response.status() == HealthCheckResponse::SERVING) return {};
    return HealthCheckResponse::ServingStatus_Name(response.status());
  }
};

struct Stubs {
  std::unique_ptr<plumb::v1::Ranker::Stub> ranker;
  std::unique_ptr<grpc::health::v1::Health::Stub> health;
};

}  // namespace

const char* LoadRpcName(LoadRpc rpc) {
  switch (rpc) {
    case LoadRpc::kRecommend:
      return "recommend";
    case LoadRpc::kSimilar:
      return "similar";
    case LoadRpc::kHealth:
      return "health";
  }
  return "?";
}

void CallTally::AddError(const std::string& code, const std::string& message) {
  ++failed;
  if (++errors_by_code[code] == 1) first_error[code] = message;
}

LoadGenerator::LoadGenerator(std::vector<std::shared_ptr<grpc::Channel>> channels,
                             const std::vector<std::string>* ids, const LoadOptions& options)
    : channels_(std::move(channels)), ids_(ids), options_(options) {}

Status LoadGenerator::Run(LoadResult* result) {
  const LoadOptions& o = options_;
  if (channels_.empty()) return Status::InvalidArgument("no channel to the server");
  if (o.rpc != LoadRpc::kHealth && (ids_ == nullptr || ids_->empty())) {
    return Status::InvalidArgument(std::string("--rpc ") + LoadRpcName(o.rpc) + " needs " +
                                   (o.rpc == LoadRpc::kRecommend ? "user" : "item") + " ids");
  }
  if (!(o.duration_seconds > 0)) return Status::InvalidArgument("the duration must be positive");
  if (!(o.warmup_seconds >= 0)) return Status::InvalidArgument("the warm-up must not be negative");
  if (o.rate <= 0 && o.concurrency == 0) {
    return Status::InvalidArgument("closed loop needs a concurrency of at least 1");
  }

  std::vector<Stubs> stubs;
  for (const auto& channel : channels_) {
    stubs.push_back(
        {plumb::v1::Ranker::NewStub(channel), grpc::health::v1::Health::NewStub(channel)});
  }
  const ZipfDraw draw(o.rpc == LoadRpc::kHealth ? 1 : ids_->size(), o.zipf_s, o.seed);

  uint32_t threads = std::max<uint32_t>(1, o.threads);
  if (o.rate <= 0) threads = std::min(threads, o.concurrency);

  using std::chrono::duration_cast;
  const LoadClock::time_point begin = LoadClock::now() + std::chrono::milliseconds(20);
  const LoadClock::time_point measure =
      begin + duration_cast<LoadClock::duration>(std::chrono::duration<double>(o.warmup_seconds));
  const LoadClock::time_point end =
      measure +
      duration_cast<LoadClock::duration>(std::chrono::duration<double>(o.duration_seconds));

  std::mutex mu;  // guards tally and latencies
  CallTally tally;
  LatencyRecord latencies(o.max_samples, o.seed);

  auto completion = [&](PendingCall* pending, LoadClock::time_point finished) {
    if (pending->scheduled < measure || pending->scheduled >= end) return;
    const QueryCall* call = static_cast<const QueryCall*>(pending);
    const int64_t ns =
        std::chrono::duration_cast<std::chrono::nanoseconds>(finished - call->scheduled).count();
    std::lock_guard<std::mutex> lock(mu);
    if (!call->status.ok()) {
      tally.AddError(StatusCodeName(call->status.error_code()), call->status.error_message());
    } else if (std::string problem = call->Problem(); !problem.empty()) {
      tally.AddError(problem, "the health check answered " + problem);
    } else {
      ++tally.ok;
      latencies.Add(ns);
    }
  };

  std::vector<std::unique_ptr<CallPacer>> pacers;
  for (uint32_t t = 0; t < threads; ++t) {
    PacingOptions pacing;
    if (o.rate > 0) {
      pacing.rate = o.rate / threads;
      pacing.phase = static_cast<double>(t) / threads;
      pacing.max_outstanding = std::max<uint32_t>(1, o.max_outstanding / threads);
    } else {
      pacing.concurrency = o.concurrency / threads + (t < o.concurrency % threads ? 1 : 0);
    }
    // Per-thread state lives in the starter: a generator and the next channel to use.
    auto rng = std::make_shared<std::mt19937_64>(o.seed * 0x9E3779B97F4A7C15ull + t + 1);
    auto turn = std::make_shared<size_t>(t);
    CallPacer::Starter start = [&, rng, turn](grpc::CompletionQueue* cq,
                                              LoadClock::time_point scheduled) -> PendingCall* {
      Stubs& stub = stubs[(*turn)++ % stubs.size()];
      const auto deadline =
          std::chrono::system_clock::now() + std::chrono::milliseconds(o.deadline_ms);
      switch (o.rpc) {
        case LoadRpc::kRecommend: {
          auto* call = new UnaryCall<plumb::v1::RecommendRequest, plumb::v1::RecommendResponse>;
          call->scheduled = scheduled;
          call->context.set_deadline(deadline);
          AttachBearerToken(o.bearer_token, &call->context);
          call->request.set_user_id((*ids_)[draw(*rng)]);
          call->request.set_count(o.count);
          call->request.set_include_seen(!o.exclude_seen);
          call->reader = stub.ranker->PrepareAsyncRecommend(&call->context, call->request, cq);
          call->reader->StartCall();
          call->reader->Finish(&call->response, &call->status, call);
          return call;
        }
        case LoadRpc::kSimilar: {
          auto* call =
              new UnaryCall<plumb::v1::SimilarItemsRequest, plumb::v1::SimilarItemsResponse>;
          call->scheduled = scheduled;
          call->context.set_deadline(deadline);
          AttachBearerToken(o.bearer_token, &call->context);
          call->request.set_item_id((*ids_)[draw(*rng)]);
          call->request.set_count(o.count);
          call->reader = stub.ranker->PrepareAsyncSimilarItems(&call->context, call->request, cq);
          call->reader->StartCall();
          call->reader->Finish(&call->response, &call->status, call);
          return call;
        }
        case LoadRpc::kHealth:
          break;
      }
      auto* call = new HealthCall;
      call->scheduled = scheduled;
      call->context.set_deadline(deadline);
      call->request.set_service(o.health_service);
      call->reader = stub.health->PrepareAsyncCheck(&call->context, call->request, cq);
      call->reader->StartCall();
      call->reader->Finish(&call->response, &call->status, call);
      return call;
    };
    pacers.push_back(std::make_unique<CallPacer>(pacing, std::move(start), completion));
  }

  std::vector<std::thread> workers;
  for (auto& pacer : pacers) {
    workers.emplace_back([&pacer, begin, end] { pacer->Run(begin, end); });
  }
  for (std::thread& w : workers) w.join();

  *result = LoadResult{};
  result->seconds = o.duration_seconds;
  for (const auto& pacer : pacers) {
    result->started += pacer->started();
    result->delayed += pacer->delayed();
    const LatencySummary lag = pacer->start_lag();
    if (lag.count > 0 && (result->start_lag.count == 0 || lag.p99_ns > result->start_lag.p99_ns)) {
      result->start_lag = lag;
    }
  }
  result->calls = std::move(tally);
  result->calls.latency = latencies.Summarize();
  return Status::Ok();
}

}  // namespace plumb::tools
