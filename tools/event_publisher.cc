#include "tools/event_publisher.h"

#include <algorithm>
#include <chrono>
#include <cstdio>
#include <random>

#include "plumb/v1/ingest.grpc.pb.h"
#include "tools/client_channel.h"
#include "tools/zipf_draw.h"

namespace plumb::tools {
namespace {

struct BatchCall : PendingCall {
  plumb::v1::PublishBatchRequest request;
  plumb::v1::PublishSummary summary;
  std::unique_ptr<grpc::ClientAsyncResponseReader<plumb::v1::PublishSummary>> reader;
};

}  // namespace

EventPublisher::EventPublisher(std::shared_ptr<grpc::Channel> channel,
                               const std::vector<std::string>* users,
                               const std::vector<std::string>* items, const PublishOptions& options)
    : channel_(std::move(channel)), users_(users), items_(items), options_(options) {}

Status EventPublisher::Run(LoadClock::time_point begin, LoadClock::time_point end,
                           PublishResult* result) {
  const PublishOptions& o = options_;
  if (users_ == nullptr || users_->empty() || items_ == nullptr || items_->empty()) {
    return Status::InvalidArgument("publishing events needs user ids and item ids");
  }
  if (!(o.events_per_second > 0) || o.batch == 0) {
    return Status::InvalidArgument("publishing needs a positive rate and batch size");
  }
  auto stub = plumb::v1::EventIngest::NewStub(channel_);
  const ZipfDraw user_draw(users_->size(), o.zipf_s, o.seed);
  std::mt19937_64 rng(o.seed);
  std::uniform_int_distribution<size_t> item_draw(0, items_->size() - 1);
  // Event ids unique to this run: a random run tag and a counter.
  std::random_device entropy;
  char run_tag[32];
  std::snprintf(run_tag, sizeof run_tag, "load-%08x%08x-", entropy(), entropy());
  uint64_t serial = 0;

  PublishResult r;
  LatencyRecord latencies;
  PacingOptions pacing;
  pacing.rate = o.events_per_second / o.batch;
  pacing.max_outstanding = o.max_outstanding;
  CallPacer pacer(
      pacing,
      [&](grpc::CompletionQueue* cq, LoadClock::time_point scheduled) -> PendingCall* {
        auto* call = new BatchCall;
        call->scheduled = scheduled;
        call->context.set_deadline(std::chrono::system_clock::now() +
                                   std::chrono::milliseconds(o.deadline_ms));
        AttachBearerToken(o.bearer_token, &call->context);
        for (uint32_t i = 0; i < o.batch; ++i) {
          plumb::v1::InteractionEvent* event = call->request.add_events();
          event->set_user_id((*users_)[user_draw(rng)]);
          event->set_item_id((*items_)[item_draw(rng)]);
          if (o.event_ids) event->set_event_id(std::string(run_tag) + std::to_string(++serial));
        }
        call->reader = stub->PrepareAsyncPublishBatch(&call->context, call->request, cq);
        call->reader->StartCall();
        call->reader->Finish(&call->summary, &call->status, call);
        return call;
      },
      [&](PendingCall* pending, LoadClock::time_point finished) {
        const auto* call = static_cast<const BatchCall*>(pending);
        ++r.batches;
        r.events_sent += static_cast<uint64_t>(call->request.events_size());
        if (!call->status.ok()) {
          r.calls.AddError(StatusCodeName(call->status.error_code()), call->status.error_message());
          return;
        }
        ++r.calls.ok;
        latencies.Add(
            std::chrono::duration_cast<std::chrono::nanoseconds>(finished - call->scheduled)
                .count());
        r.accepted += call->summary.accepted();
        r.duplicates += call->summary.duplicates();
        r.rejected += call->summary.rejected();
        r.acknowledged += call->summary.accepted() + call->summary.duplicates();
      });
  pacer.Run(begin, end);
  r.seconds = std::chrono::duration<double>(end - begin).count();
  r.delayed = pacer.delayed();
  r.start_lag = pacer.start_lag();
  r.calls.latency = latencies.Summarize();
  *result = std::move(r);
  return Status::Ok();
}

}  // namespace plumb::tools
