#include "trainer/online/jetstream_source.h"

#include <nats/nats.h>
#include <prometheus/counter.h>
#include <prometheus/gauge.h>
#include <prometheus/registry.h>
#include <spdlog/spdlog.h>

#include <algorithm>
#include <array>
#include <charconv>
#include <chrono>
#include <cstring>
#include <deque>
#include <future>
#include <mutex>
#include <utility>

#include "core/clock.h"
#include "plumb/v1/ingest.pb.h"
#include "replica/nats_access.h"
#include "rpc/message_decoding.h"

namespace plumb::online {
namespace {

std::string NatsError(natsStatus s, jsErrCode jerr = static_cast<jsErrCode>(0)) {
  std::string text = replica::NatsErrorText(s);
  if (jerr != 0) text += " [JetStream error " + std::to_string(static_cast<int>(jerr)) + "]";
  return text;
}

// A delivery's reply subject carries its metadata: $JS.ACK.<stream>.<consumer>.<delivered>.
// <stream seq>.<consumer seq>.<time>.<pending>, or, from newer servers, with a domain and an
// account hash after "$JS.ACK" (and a token more at the end).
void ParseAckSubject(const char* reply, uint64_t* delivered, uint64_t* stream_sequence) {
  std::vector<std::string_view> tokens;
  std::string_view rest = reply != nullptr ? reply : "";
  while (!rest.empty()) {
    const size_t dot = rest.find('.');
    tokens.push_back(rest.substr(0, dot));
    rest = dot == std::string_view::npos ? std::string_view() : rest.substr(dot + 1);
  }
  if (tokens.size() < 9 || tokens[0] != "$JS" || tokens[1] != "ACK") return;
  const size_t at = tokens.size() == 9 ? 4 : 6;
  auto number = [](std::string_view t) {
    uint64_t v = 0;
    std::from_chars(t.data(), t.data() + t.size(), v);
    return v;
  };
  *delivered = number(tokens[at]);
  *stream_sequence = number(tokens[at + 1]);
}

bool HasUnknownFields(const google::protobuf::Message& m) {
  return !m.GetReflection()->GetUnknownFields(m).empty();
}

}  // namespace

const char* TerminateReasonLabel(TerminateReason reason) {
  switch (reason) {
    case TerminateReason::kOversized:
      return "oversized";
    case TerminateReason::kUndecodable:
      return "undecodable";
    case TerminateReason::kWrongType:
      return "wrong_type";
    case TerminateReason::kTooManyEvents:
      return "too_many_events";
    case TerminateReason::kNoValidEvent:
      return "no_valid_event";
  }
  return "unknown";
}

struct JetStreamSource::Impl {
  // Messages pulled together and handed to the committer as one submission.
  struct Pull {
    std::future<CommitOutcome> outcome;
    std::vector<natsMsg*> messages;  // owned; acked (or nak'ed) when the outcome is known
  };

  Impl(const JetStreamOptions& o, GroupCommitter* c, TrainMetrics* m)
      : options(o), committer(c), metrics(m) {
    auto& terminated_family = prometheus::BuildCounter()
                                  .Name("plumb_jetstream_messages_terminated_total")
                                  .Help(
                                      "JetStream messages terminated (never redelivered) "
                                      "because they can never be stored, by reason")
                                  .Register(*m->registry());
    for (int r = 0; r < kNumTerminateReasons; ++r) {
      terminated_counters[r] = &terminated_family.Add(
          {{"reason", TerminateReasonLabel(static_cast<TerminateReason>(r))}});
    }
    acked_counter = &prometheus::BuildCounter()
                         .Name("plumb_jetstream_messages_acked_total")
                         .Help(
                             "JetStream messages acknowledged after their events were "
                             "durable in the event log")
                         .Register(*m->registry())
                         .Add({});
    redelivered_counter = &prometheus::BuildCounter()
                               .Name("plumb_jetstream_redelivered_messages_total")
                               .Help(
                                   "JetStream messages received more than once (their "
                                   "events come back as duplicates)")
                               .Register(*m->registry())
                               .Add({});
    connected_gauge = &prometheus::BuildGauge()
                           .Name("plumb_jetstream_connected")
                           .Help(
                               "1 while plumb-train is connected to a NATS server and "
                               "subscribed to its consumer")
                           .Register(*m->registry())
                           .Add({});
  }

  Status Configure() {
    if (options.access.servers.empty()) return Status::InvalidArgument("JetStream: no server URL");
    if (options.stream.empty() || options.subject.empty() || options.consumer.empty()) {
      return Status::InvalidArgument("JetStream: stream, subject and consumer must be named");
    }
    PLUMB_RETURN_IF_ERROR(
        replica::MakeNatsOptions(options.access, "plumb-train", &nats_options, "JetStream"));
    {
      // Never freed (see CallbackState); kept reachable, so leak checkers stay quiet.
      static std::mutex pool_mu;
      static std::deque<CallbackState> pool;
      std::lock_guard<std::mutex> lock(pool_mu);
      callbacks = &pool.emplace_back();
    }
    callbacks->connected = connected_gauge;
    natsOptions_SetDisconnectedCB(nats_options, &Impl::OnDisconnected, callbacks);
    natsOptions_SetReconnectedCB(nats_options, &Impl::OnReconnected, callbacks);
    return Status::Ok();
  }

  // What libnats' connection callbacks may touch. libnats runs them on its own thread and
  // may still run one after natsConnection_Destroy returned, so this outlives the source:
  // it lives as long as the process, and the source marks it dead when it stops.
  struct CallbackState {
    std::mutex mu;
    bool alive = true;
    prometheus::Gauge* connected = nullptr;
  };
  static void OnDisconnected(natsConnection*, void* closure) {
    auto* state = static_cast<CallbackState*>(closure);
    std::lock_guard<std::mutex> lock(state->mu);
    if (!state->alive) return;
    state->connected->Set(0);
    spdlog::warn("JetStream: disconnected from NATS; reconnecting");
  }
  static void OnReconnected(natsConnection* nc, void* closure) {
    auto* state = static_cast<CallbackState*>(closure);
    std::lock_guard<std::mutex> lock(state->mu);
    if (!state->alive) return;
    state->connected->Set(1);
    spdlog::info("JetStream: reconnected to {}", replica::ConnectedUrl(nc));
  }
  // Called once the consumer thread has ended: no callback touches the source afterwards.
  void SilenceCallbacks() {
    std::lock_guard<std::mutex> lock(callbacks->mu);
    callbacks->alive = false;
  }

  // Connects and binds to the durable consumer (creating it when missing). Logs and
  // returns false on failure; the caller retries.
  bool Connect() {
    jsOptions js_options;
    jsOptions_Init(&js_options);
    const char* step = "";
    natsStatus s = static_cast<natsStatus>(
        replica::ConnectJetStream(nats_options, &js_options, &nc, &js, &step));
    if (s != NATS_OK) {
      std::string what = step;
      if (what == "cannot connect") what += " to " + Servers();
      return Failed(what, s);
    }
    jsErrCode jerr = static_cast<jsErrCode>(0);
    if (options.create_replicas > 0) {
      jsStreamInfo* stream_info = nullptr;
      s = js_GetStreamInfo(&stream_info, js, options.stream.c_str(), nullptr, &jerr);
      if (s == NATS_NOT_FOUND || jerr == JSStreamNotFoundErr) {
        jsStreamConfig config;
        jsStreamConfig_Init(&config);
        config.Name = options.stream.c_str();
        const char* subjects[] = {options.subject.c_str()};
        config.Subjects = subjects;
        config.SubjectsLen = 1;
        config.Storage = js_FileStorage;
        config.Replicas = options.create_replicas;
        jerr = static_cast<jsErrCode>(0);
        s = js_AddStream(&stream_info, js, &config, nullptr, &jerr);
        if (s == NATS_OK) {
          spdlog::info("JetStream: created the stream {} (subject {}, {} replicas)", options.stream,
                       options.subject, options.create_replicas);
        }
      }
      if (s != NATS_OK)
        return Failed("cannot find or create the stream " + options.stream, s, jerr);
      jsStreamInfo_Destroy(stream_info);
      jerr = static_cast<jsErrCode>(0);
    }
    jsConsumerInfo* info = nullptr;
    s = js_GetConsumerInfo(&info, js, options.stream.c_str(), options.consumer.c_str(), nullptr,
                           &jerr);
    if (s == NATS_NOT_FOUND || jerr == JSConsumerNotFoundErr) {
      jsConsumerConfig config;
      jsConsumerConfig_Init(&config);
      config.Durable = options.consumer.c_str();
      config.FilterSubject = options.subject.c_str();
      config.AckPolicy = js_AckExplicit;
      config.DeliverPolicy = js_DeliverAll;
      config.AckWait = options.ack_wait_ms * 1000000;  // nanoseconds
      config.MaxAckPending =
          static_cast<int64_t>(options.fetch_batch) * (options.max_pulls_in_flight + 2);
      jerr = static_cast<jsErrCode>(0);
      s = js_AddConsumer(&info, js, options.stream.c_str(), &config, nullptr, &jerr);
      if (s == NATS_OK) {
        spdlog::info("JetStream: created the durable consumer {} on stream {} (subject {})",
                     options.consumer, options.stream, options.subject);
      }
    }
    if (s != NATS_OK) {
      return Failed(
          "cannot find or create the consumer " + options.consumer + " on stream " + options.stream,
          s, jerr);
    }
    jsConsumerInfo_Destroy(info);
    // Deliveries come to an inbox of our own, and pull requests are published by hand
    // (see PullRequest): libnats 3.4.1's natsSubscription_Fetch writes past the end of its
    // message array when deliveries of an expired pull arrive during the next one.
    natsInbox* new_inbox = nullptr;
    if ((s = natsInbox_Create(&new_inbox)) != NATS_OK) return Failed("no inbox", s);
    inbox = new_inbox;
    natsInbox_Destroy(new_inbox);
    if ((s = natsConnection_SubscribeSync(&sub, nc, inbox.c_str())) != NATS_OK) {
      return Failed("cannot subscribe to the delivery inbox", s);
    }
    natsSubscription_SetPendingLimits(sub, -1, -1);  // bounded by max_ack_pending
    next_subject = "$JS.API.CONSUMER.MSG.NEXT." + options.stream + "." + options.consumer;
    outstanding = false;
    spdlog::info("JetStream: consuming stream {} subject {} as {} via {}", options.stream,
                 options.subject, options.consumer, replica::ConnectedUrl(nc));
    failing = false;
    connected_gauge->Set(1);
    return true;
  }

  bool Failed(const std::string& what, natsStatus s, jsErrCode jerr = static_cast<jsErrCode>(0)) {
    if (!failing)
      spdlog::warn("JetStream: {}: {}; retrying every second", what, NatsError(s, jerr));
    failing = true;
    Disconnect();
    return false;
  }

  void Disconnect() {
    if (sub != nullptr) natsSubscription_Destroy(sub);  // keeps the durable consumer
    sub = nullptr;
    replica::CloseNats(&nc, &js);
    connected_gauge->Set(0);
  }

  std::string Servers() const {
    std::string all;
    for (const std::string& u : options.access.servers) all += (all.empty() ? "" : ",") + u;
    return all;
  }

  // The JetStream acknowledgement protocol: a body published to the message's reply
  // subject ("+ACK", "+TERM", "-NAK {...}").
  void Reply(natsMsg* msg, const char* body) {
    const char* reply = natsMsg_GetReply(msg);
    if (reply != nullptr && reply[0] != '\0') {
      natsConnection_Publish(nc, reply, body, static_cast<int>(std::strlen(body)));
    }
  }

  void Terminate(natsMsg* msg, TerminateReason reason, const std::string& detail) {
    Reply(msg, "+TERM");
    const int r = static_cast<int>(reason);
    terminated_counters[r]->Increment();
    terminated_totals[r].fetch_add(1);
    // One line per reason and second at most: a hostile publisher must not flood the log.
    const int64_t now = NowMs();
    if (now - last_term_log_ms[r] >= 1000) {
      last_term_log_ms[r] = now;
      spdlog::warn("JetStream: terminated a message on {} ({}): {}", natsMsg_GetSubject(msg),
                   TerminateReasonLabel(reason), detail);
    }
    natsMsg_Destroy(msg);
  }

  // Decodes one message into `events` (appending). Returns true when the message is to be
  // acked once `events` are durable; false when it was terminated (and destroyed).
  bool Decode(natsMsg* msg, int64_t received_ms, std::vector<store::EventInput>* events) {
    const int length = natsMsg_GetDataLength(msg);
    if (static_cast<size_t>(length) > options.max_message_bytes) {
      Terminate(msg, TerminateReason::kOversized,
                std::to_string(length) + " bytes; the limit is " +
                    std::to_string(options.max_message_bytes));
      return false;
    }
    const std::string_view bytes(natsMsg_GetData(msg), static_cast<size_t>(length));
    const char* payload = nullptr;
    bool batch = false;
    if (natsMsgHeader_Get(msg, "Plumb-Payload", &payload) == NATS_OK && payload != nullptr) {
      const std::string_view kind(payload);
      if (kind == "batch") {
        batch = true;
      } else if (kind != "event") {
        Terminate(msg, TerminateReason::kWrongType,
                  "Plumb-Payload is '" + std::string(kind) + "'; expected event or batch");
        return false;
      }
    }
    const google::protobuf::Descriptor& type = batch ? *plumb::v1::PublishBatchRequest::descriptor()
                                                     : *plumb::v1::InteractionEvent::descriptor();
    if (std::string why = rpc::ExplainUndecodable(type, bytes); !why.empty()) {
      Terminate(msg, TerminateReason::kUndecodable, type.full_name() + ": " + why);
      return false;
    }
    // The id of the message: the publisher's Nats-Msg-Id, else the stream sequence.
    std::string message_id;
    const char* header_id = nullptr;
    if (natsMsgHeader_Get(msg, "Nats-Msg-Id", &header_id) == NATS_OK && header_id != nullptr) {
      message_id = header_id;
    }
    uint64_t delivered = 0, stream_sequence = 0;
    ParseAckSubject(natsMsg_GetReply(msg), &delivered, &stream_sequence);
    if (delivered > 1) redelivered_counter->Increment();
    if (message_id.empty()) message_id = options.stream + "/" + std::to_string(stream_sequence);
    const size_t first = events->size();
    size_t received = 0, rejected = 0;
    auto add = [&](plumb::v1::InteractionEvent* wire, const std::string& fallback_id) {
      ++received;
      store::EventInput event;
      event.user_id = std::move(*wire->mutable_user_id());
      event.item_id = std::move(*wire->mutable_item_id());
      event.event_id =
          wire->event_id().empty() ? fallback_id : std::move(*wire->mutable_event_id());
      event.timestamp_ms = wire->timestamp_ms();
      event.weight = wire->weight();
      EventRejection why;
      if (!ValidateEvent(&event, received_ms, &why, options.max_future_skew_ms)) {
        metrics->CountRejected(why.reason);
        ++rejected;
        return;
      }
      events->push_back(std::move(event));
    };
    if (batch) {
      plumb::v1::PublishBatchRequest request;
      if (!request.ParseFromArray(bytes.data(), static_cast<int>(bytes.size()))) {
        Terminate(msg, TerminateReason::kUndecodable, "not a PublishBatchRequest");
        return false;
      }
      bool unknown = HasUnknownFields(request);
      for (const auto& e : request.events()) unknown = unknown || HasUnknownFields(e);
      if (unknown) {
        Terminate(msg, TerminateReason::kWrongType,
                  "fields a plumb.v1.PublishBatchRequest does not have");
        return false;
      }
      if (static_cast<size_t>(request.events_size()) > options.max_message_events) {
        Terminate(msg, TerminateReason::kTooManyEvents,
                  std::to_string(request.events_size()) + " events; the limit is " +
                      std::to_string(options.max_message_events));
        return false;
      }
      for (int i = 0; i < request.events_size(); ++i) {
        add(request.mutable_events(i), message_id + "/" + std::to_string(i));
      }
    } else {
      plumb::v1::InteractionEvent wire;
      if (!wire.ParseFromArray(bytes.data(), static_cast<int>(bytes.size()))) {
        Terminate(msg, TerminateReason::kUndecodable, "not an InteractionEvent");
        return false;
      }
      if (HasUnknownFields(wire)) {
        Terminate(msg, TerminateReason::kWrongType,
                  "fields a plumb.v1.InteractionEvent does not have");
        return false;
      }
      add(&wire, message_id);
    }
    if (received == 0 || rejected == received) {
      events->resize(first);
      Terminate(msg, TerminateReason::kNoValidEvent,
                received == 0 ? "an empty batch"
                              : "all " + std::to_string(received) + " events failed validation");
      return false;
    }
    return true;
  }

  // Waits for the oldest pull's write and acks (or naks) its messages.
  void Settle() {
    Pull pull = std::move(in_flight.front());
    in_flight.pop_front();
    const CommitOutcome outcome = pull.outcome.get();
    if (outcome.status.ok()) {
      for (natsMsg* m : pull.messages) {
        Reply(m, "+ACK");
        natsMsg_Destroy(m);
      }
      acked_counter->Increment(static_cast<double>(pull.messages.size()));
      acked_total.fetch_add(pull.messages.size());
      write_failing = false;
      return;
    }
    if (!write_failing) {
      spdlog::error(
          "JetStream: the event log refused a write ({}); messages come back after "
          "a delay, nothing is acknowledged until the log is writable",
          outcome.status.ToString());
    }
    write_failing = true;
    for (natsMsg* m : pull.messages) {
      Reply(m, "-NAK {\"delay\": 1000000000}");  // again in 1 s
      natsMsg_Destroy(m);
    }
  }

  // Asks the consumer for up to fetch_batch messages, delivered to our inbox within
  // kPullExpiresMs. One request is outstanding at a time (more only when a late status of an
  // earlier one ends the current one early).
  static constexpr int64_t kPullExpiresMs = 500;
  void PullRequest() {
    const std::string body = "{\"batch\": " + std::to_string(options.fetch_batch) +
                             ", \"expires\": " + std::to_string(kPullExpiresMs * 1000000) + "}";
    const natsStatus s = natsConnection_PublishRequest(nc, next_subject.c_str(), inbox.c_str(),
                                                       body.data(), static_cast<int>(body.size()));
    outstanding = s == NATS_OK;
    remaining = options.fetch_batch;
    pull_deadline_ms = NowMs() + kPullExpiresMs + 250;
  }

  // What a status message (no payload, header Status) says about the pull: 408 the request
  // expired, 404 nothing to deliver, 409 the server ended it (e.g. a leader change, too many
  // waiting requests), 503 no JetStream answers (the consumer's leader is being elected).
  void OnStatus(natsMsg* msg) {
    const char* code = nullptr;
    natsMsgHeader_Get(msg, "Status", &code);
    const std::string status = code != nullptr ? code : "";
    outstanding = false;
    if (status == "409" || status == "503") {
      const char* description = nullptr;
      natsMsgHeader_Get(msg, "Description", &description);
      if (!fetch_failing) {
        spdlog::warn("JetStream: pull ended by the server ({} {}); retrying", status,
                     description != nullptr ? description : "");
      }
      fetch_failing = true;
      std::this_thread::sleep_for(std::chrono::milliseconds(100));
    }
  }

  // Decodes what was collected, hands the events to the committer, and settles finished
  // writes.
  void Flush(std::vector<natsMsg*>* collected) {
    if (collected->empty()) return;
    if (fetch_failing) spdlog::info("JetStream: pulling again");
    fetch_failing = false;
    const int64_t received_ms = NowMs();
    Pull pull;
    std::vector<store::EventInput> events;
    for (natsMsg* m : *collected) {
      if (Decode(m, received_ms, &events)) pull.messages.push_back(m);
    }
    collected->clear();
    if (pull.messages.empty()) return;
    pull.outcome = committer->Submit(std::move(events));
    in_flight.push_back(std::move(pull));
    while (in_flight.size() > static_cast<size_t>(options.max_pulls_in_flight)) Settle();
  }

  void Run() {
    std::vector<natsMsg*> collected;
    while (!stopping.load()) {
      if (sub == nullptr && !Connect()) {
        for (int i = 0; i < 10 && !stopping.load(); ++i) {
          std::this_thread::sleep_for(std::chrono::milliseconds(100));
        }
        continue;
      }
      while (!in_flight.empty() && in_flight.front().outcome.wait_for(std::chrono::seconds(0)) ==
                                       std::future_status::ready) {
        Settle();
      }
      if (outstanding && NowMs() > pull_deadline_ms) outstanding = false;  // lost
      if (!outstanding) PullRequest();
      // Waiting: briefly once something was collected (a trickle is written at once),
      // otherwise until the request should have ended.
      const int64_t wait_ms =
          collected.empty()
              ? std::max<int64_t>(1, std::min<int64_t>(pull_deadline_ms - NowMs(), 250))
              : 2;
      natsMsg* msg = nullptr;
      const natsStatus s = natsSubscription_NextMsg(&msg, sub, wait_ms);
      if (s == NATS_TIMEOUT) {
        Flush(&collected);
        continue;
      }
      if (s != NATS_OK) {
        if (s == NATS_CONNECTION_CLOSED || s == NATS_INVALID_SUBSCRIPTION) {
          Flush(&collected);
          Failed("the subscription ended", s);
          continue;
        }
        if (!fetch_failing) spdlog::warn("JetStream: receive failed: {}; retrying", NatsError(s));
        fetch_failing = true;
        std::this_thread::sleep_for(std::chrono::milliseconds(100));
        continue;
      }
      const char* reply = natsMsg_GetReply(msg);
      if (natsMsg_GetDataLength(msg) == 0 && (reply == nullptr || reply[0] == '\0')) {
        OnStatus(msg);  // a status, not a delivery (a delivery always has an ack subject)
        natsMsg_Destroy(msg);
        continue;
      }
      collected.push_back(msg);
      if (--remaining <= 0 && outstanding) {
        PullRequest();  // the next batch comes while this one is written
      }
      if (collected.size() >= static_cast<size_t>(options.fetch_batch)) Flush(&collected);
    }
    Flush(&collected);
    while (!in_flight.empty()) Settle();
    if (nc != nullptr) natsConnection_FlushTimeout(nc, 2000);  // the last acks
    if (callbacks != nullptr) SilenceCallbacks();  // closing on purpose: no "reconnecting"
    Disconnect();
  }

  const JetStreamOptions options;
  GroupCommitter* const committer;
  TrainMetrics* const metrics;
  natsOptions* nats_options = nullptr;
  natsConnection* nc = nullptr;
  jsCtx* js = nullptr;
  natsSubscription* sub = nullptr;
  std::string inbox, next_subject;
  bool outstanding = false;  // a pull request is being served
  int remaining = 0;         // deliveries still due on it
  int64_t pull_deadline_ms = 0;
  std::deque<Pull> in_flight;
  bool failing = false, fetch_failing = false, write_failing = false;
  std::array<int64_t, kNumTerminateReasons> last_term_log_ms{};

  std::array<prometheus::Counter*, kNumTerminateReasons> terminated_counters{};
  prometheus::Counter* acked_counter = nullptr;
  prometheus::Counter* redelivered_counter = nullptr;
  prometheus::Gauge* connected_gauge = nullptr;
  CallbackState* callbacks = nullptr;
  std::array<std::atomic<uint64_t>, kNumTerminateReasons> terminated_totals{};
  std::atomic<uint64_t> acked_total{0};

  std::atomic<bool> stopping{false};
  std::mutex stop_mu;
  std::thread thread;
};

JetStreamSource::JetStreamSource(const JetStreamOptions& options, GroupCommitter* committer,
                                 TrainMetrics* metrics)
    : impl_(std::make_unique<Impl>(options, committer, metrics)) {}

JetStreamSource::~JetStreamSource() {
  Stop();
  if (impl_->nats_options != nullptr) natsOptions_Destroy(impl_->nats_options);
}

Status JetStreamSource::Start() {
  PLUMB_RETURN_IF_ERROR(impl_->Configure());
  impl_->thread = std::thread([this] { impl_->Run(); });
  return Status::Ok();
}

void JetStreamSource::Stop() {
  std::lock_guard<std::mutex> lock(impl_->stop_mu);
  impl_->stopping.store(true);
  if (impl_->thread.joinable()) impl_->thread.join();
  if (impl_->callbacks != nullptr) impl_->SilenceCallbacks();
}

std::string JetStreamSource::Describe() const {
  return "JetStream stream " + impl_->options.stream + " subject " + impl_->options.subject +
         " (durable consumer " + impl_->options.consumer + ") via " + impl_->Servers();
}

uint64_t JetStreamSource::acked() const { return impl_->acked_total.load(); }

uint64_t JetStreamSource::terminated(TerminateReason reason) const {
  return impl_->terminated_totals[static_cast<int>(reason)].load();
}

}  // namespace plumb::online
