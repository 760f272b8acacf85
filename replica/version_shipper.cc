#include "replica/version_shipper.h"

#include <nats/nats.h>
#include <prometheus/counter.h>
#include <prometheus/gauge.h>
#include <prometheus/registry.h>
#include <spdlog/spdlog.h>

#include <algorithm>
#include <charconv>
#include <condition_variable>
#include <mutex>
#include <thread>
#include <vector>

#include "core/run_every.h"
#include "replica/canary_pointer.h"
#include "replica/version_bundle.h"
#include "store/store.h"

namespace plumb::replica {

struct VersionShipper::Impl {
  Impl(store::Store* s, VersionShipOptions o, prometheus::Registry* registry)
      : store(s), options(std::move(o)) {
    shipped_counter = &prometheus::BuildCounter()
                           .Name("plumb_versions_shipped_total")
                           .Help("Versions published whole to the JetStream version stream")
                           .Register(*registry)
                           .Add({});
    failure_counter = &prometheus::BuildCounter()
                           .Name("plumb_version_ship_failures_total")
                           .Help(
                               "Rounds in which shipping a version or moving the pointer "
                               "failed (retried next round)")
                           .Register(*registry)
                           .Add({});
    pointer_gauge = &prometheus::BuildGauge()
                         .Name("plumb_version_pointer")
                         .Help("The version the replicas' pointer names (0: not put yet)")
                         .Register(*registry)
                         .Add({});
    seconds_gauge = &prometheus::BuildGauge()
                         .Name("plumb_version_ship_seconds")
                         .Help("Seconds the last version took to read, encode and publish")
                         .Register(*registry)
                         .Add({});
  }

  std::string Subject(uint64_t version) const {
    return options.subject_prefix + "." + std::to_string(version);
  }

  bool Connect() {
    // Chunks are published asynchronously, a few in flight, and the ship waits for every
    // acknowledgement (js_PublishAsyncComplete); a refused one is counted here.
    jsOptions jo;
    jsOptions_Init(&jo);
    jo.PublishAsync.MaxPending = kChunksInFlight;
    // With kChunksInFlight unacknowledged, the next publish waits for room. libnats' default
    // wait (200 ms) is shorter than a three-replica stream takes to store a few megabytes on a
    // busy host: the publish then failed and the whole version was shipped again from the
    // start, over and over (measured: 1M x 64 versions retried for minutes). Wait as long as
    // for the final acknowledgements.
    jo.PublishAsync.StallWait = kAckWaitMs;
    jo.PublishAsync.ErrHandler = &Impl::OnPublishError;
    jo.PublishAsync.ErrHandlerClosure = &publish_errors;
    const char* step = "";
    natsStatus s = static_cast<natsStatus>(ConnectJetStream(nats_options, &jo, &nc, &js, &step));
    if (s != NATS_OK) {
      std::string servers;
      for (const std::string& url : options.access.servers) {
        servers += (servers.empty() ? "" : ",") + url;
      }
      return Failed(std::string(step) + " (" + servers + ")", NatsErrorText(s));
    }
    jsErrCode jerr = static_cast<jsErrCode>(0);
    jsStreamInfo* info = nullptr;
    s = js_GetStreamInfo(&info, js, options.stream.c_str(), nullptr, &jerr);
    if (s == NATS_NOT_FOUND) {
      jsStreamConfig config;
      jsStreamConfig_Init(&config);
      const std::string subjects = options.subject_prefix + ".>";
      const char* list[] = {subjects.c_str()};
      config.Name = options.stream.c_str();
      config.Subjects = list;
      config.SubjectsLen = 1;
      config.Storage = js_FileStorage;
      config.Replicas = options.replicas;
      s = js_AddStream(&info, js, &config, nullptr, &jerr);
      if (s == NATS_OK) spdlog::info("versions: created stream {} ({})", options.stream, subjects);
    }
    if (s != NATS_OK) {
      return Failed("cannot find or create stream " + options.stream,
                    NatsErrorText(s) + " [JetStream error " + std::to_string(jerr) + "]");
    }
    jsStreamInfo_Destroy(info);
    s = js_KeyValue(&kv, js, options.bucket.c_str());
    if (s == NATS_NOT_FOUND) {
      kvConfig config;
      kvConfig_Init(&config);
      config.Bucket = options.bucket.c_str();
      config.History = 10;
      config.StorageType = js_FileStorage;
      config.Replicas = options.replicas;
      s = js_CreateKeyValue(&kv, js, &config);
      if (s == NATS_OK) spdlog::info("versions: created key-value bucket {}", options.bucket);
    }
    if (s != NATS_OK) {
      return Failed("cannot find or create bucket " + options.bucket, NatsErrorText(s));
    }
    const int64_t max_payload = natsConnection_GetMaxPayload(nc);
    chunk_bytes =
        static_cast<size_t>(std::max<int64_t>(1024, max_payload - 1024)) - kChunkHeaderBytes;
    if (options.max_chunk_bytes > 0) chunk_bytes = std::min(chunk_bytes, options.max_chunk_bytes);
    spdlog::info("versions: shipping to stream {} and bucket {} via {} ({} bytes a chunk)",
                 options.stream, options.bucket, ConnectedUrl(nc), chunk_bytes);
    failing.clear();
    return true;
  }

  static constexpr int kChunksInFlight = 16;
  static constexpr int64_t kAckWaitMs = 30000;
  static void OnPublishError(jsCtx*, jsPubAckErr*, void* closure) {
    static_cast<std::atomic<int>*>(closure)->fetch_add(1);
  }

  bool Failed(const std::string& what, const std::string& why) {
    const std::string text = what + ": " + why;
    if (text != failing) spdlog::warn("versions: {}; retrying", text);
    failing = text;
    failure_counter->Increment();
    Disconnect();
    return false;
  }

  void Disconnect() {
    if (kv != nullptr) kvStore_Destroy(kv);
    kv = nullptr;
    CloseNats(&nc, &js);
  }

  // Whether the stream holds all of `version`: its subject's last message is its trailer.
  // *partial is set when the subject holds something else (an interrupted ship).
  Status InStream(uint64_t version, bool* whole, bool* partial) {
    *whole = *partial = false;
    natsMsg* last = nullptr;
    jsErrCode jerr = static_cast<jsErrCode>(0);
    natsStatus s =
        js_GetLastMsg(&last, js, options.stream.c_str(), Subject(version).c_str(), nullptr, &jerr);
    if (s == NATS_NOT_FOUND) return Status::Ok();
    if (s != NATS_OK) return Status::Unavailable("reading the stream: " + NatsErrorText(s));
    const std::string_view data(natsMsg_GetData(last), natsMsg_GetDataLength(last));
    Trailer t;
    *whole = ParseTrailer(data, &t).ok() && t.version == version;
    *partial = !*whole;
    natsMsg_Destroy(last);
    return Status::Ok();
  }

  Status Purge(const std::string& subject) {
    jsOptions o;
    jsOptions_Init(&o);
    o.Stream.Purge.Subject = subject.c_str();
    jsErrCode jerr = static_cast<jsErrCode>(0);
    natsStatus s = js_PurgeStream(js, options.stream.c_str(), &o, &jerr);
    if (s != NATS_OK) return Status::Unavailable("purging " + subject + ": " + NatsErrorText(s));
    return Status::Ok();
  }

  Status Ship(uint64_t version) {
    bool whole = false, partial = false;
    PLUMB_RETURN_IF_ERROR(InStream(version, &whole, &partial));
    if (whole) {
      spdlog::info("versions: version {} is already in stream {}", version, options.stream);
      return Status::Ok();
    }
    if (partial) PLUMB_RETURN_IF_ERROR(Purge(Subject(version)));
    const auto start = std::chrono::steady_clock::now();
    std::string bytes;
    {
      VersionBundle bundle;
      PLUMB_RETURN_IF_ERROR(ReadVersionBundle(*store, version, &bundle));
      PLUMB_RETURN_IF_ERROR(EncodeBundle(bundle, &bytes));
    }
    const auto encoded = std::chrono::steady_clock::now();
    const std::vector<std::string> messages = CutIntoChunks(version, bytes, chunk_bytes);
    std::string().swap(bytes);
    const std::string subject = Subject(version);
    publish_errors.store(0);
    for (size_t i = 0; i < messages.size(); ++i) {
      natsStatus s = js_PublishAsync(js, subject.c_str(), messages[i].data(),
                                     static_cast<int>(messages[i].size()), nullptr);
      if (s != NATS_OK) {
        return Status::Unavailable("publishing message " + std::to_string(i + 1) + " of " +
                                   std::to_string(messages.size()) + " of version " +
                                   std::to_string(version) + ": " + NatsErrorText(s));
      }
    }
    jsPubOptions pub;
    jsPubOptions_Init(&pub);
    pub.MaxWait = kAckWaitMs;
    if (natsStatus s = js_PublishAsyncComplete(js, &pub); s != NATS_OK) {
      return Status::Unavailable("waiting for the acknowledgements of version " +
                                 std::to_string(version) + ": " + NatsErrorText(s));
    }
    if (const int errors = publish_errors.load(); errors > 0) {
      return Status::Unavailable(std::to_string(errors) + " of the " +
                                 std::to_string(messages.size()) + " messages of version " +
                                 std::to_string(version) + " were not stored by JetStream");
    }
    const double seconds =
        std::chrono::duration<double>(std::chrono::steady_clock::now() - start).count();
    seconds_gauge->Set(seconds);
    shipped_counter->Increment();
    shipped_total.fetch_add(1);
    size_t total = 0;
    for (const std::string& m : messages) total += m.size();
    spdlog::info(
        "versions: shipped version {} ({:.1f} MB in {} chunks) in {:.2f} s (read and encode "
        "{:.2f} s, publish {:.2f} s)",
        version, total / 1e6, messages.size() - 1, seconds,
        std::chrono::duration<double>(encoded - start).count(),
        std::chrono::duration<double>(std::chrono::steady_clock::now() - encoded).count());
    return Status::Ok();
  }

  // The version numbers the stream holds (any subject <prefix>.<number>), newest first.
  bool StreamVersions(std::vector<uint64_t>* versions) {
    versions->clear();
    jsOptions o;
    jsOptions_Init(&o);
    const std::string filter = options.subject_prefix + ".>";
    o.Stream.Info.SubjectsFilter = filter.c_str();
    jsStreamInfo* info = nullptr;
    jsErrCode jerr = static_cast<jsErrCode>(0);
    if (js_GetStreamInfo(&info, js, options.stream.c_str(), &o, &jerr) != NATS_OK) return false;
    if (info->State.Subjects != nullptr) {
      for (int i = 0; i < info->State.Subjects->Count; ++i) {
        const std::string_view subject = info->State.Subjects->List[i].Subject;
        const std::string_view number = subject.substr(options.subject_prefix.size() + 1);
        uint64_t v = 0;
        if (std::from_chars(number.data(), number.data() + number.size(), v).ec == std::errc()) {
          versions->push_back(v);
        }
      }
    }
    jsStreamInfo_Destroy(info);
    std::sort(versions->rbegin(), versions->rend());
    return true;
  }

  // A number must never name two versions: replicas keep bundles by number. When the stream
  // holds a number this store has not reached (its store was restored from an older backup,
  // or another trainer shipped to the same stream), the store's numbering moves past it.
  void KeepNumberingAhead(const std::vector<uint64_t>& in_stream) {
    if (in_stream.empty()) return;
    uint64_t was = 0;
    Status s = store->SkipVersionNumbers(in_stream.front() + 1, &was);
    if (!s.ok()) {
      spdlog::warn("versions: cannot move the version numbering past {}: {}", in_stream.front(),
                   s.ToString());
    } else if (was <= in_stream.front()) {
      spdlog::warn(
          "versions: stream {} holds version {}, beyond this store's numbering (next was {}); "
          "new versions are numbered from {} so that no number names two versions",
          options.stream, in_stream.front(), was, in_stream.front() + 1);
    }
  }

  // Drops the stream's versions beyond the newest keep_versions, never `active` or `canary`.
  // Numbers above the store's newest version (not this trainer's: another writer's) are not
  // ranked, so that they cannot push this trainer's versions out.
  void Prune(const std::vector<uint64_t>& versions, uint64_t active, uint64_t canary) {
    std::vector<store::VersionManifest> own;
    if (!store->ListVersions(&own).ok() || own.empty()) return;
    const uint64_t newest_own = own.front().version;
    size_t rank = 0;
    for (uint64_t v : versions) {
      if (v > newest_own) continue;
      if (rank++ < options.keep_versions || v == active || v == canary) continue;
      if (Purge(Subject(v)).ok()) {
        spdlog::info("versions: purged version {} from stream {} (keeping the newest {})", v,
                     options.stream, options.keep_versions);
      }
    }
  }

  void Round() {
    if (nc == nullptr && !Connect()) return;
    uint64_t active = 0;
    store::Canary canary;
    Status read = store->GetActiveVersion(&active);
    if (read.ok()) read = store->GetCanary(&canary);
    if (!read.ok()) {
      spdlog::warn("versions: cannot read the active version or the canary: {}", read.ToString());
      return;
    }
    std::vector<uint64_t> in_stream;
    const bool listed = StreamVersions(&in_stream);
    if (listed) KeepNumberingAhead(in_stream);
    if (active == 0) return;
    bool moved = false;  // the pointer or the canary key was put this round
    if (active != pointer_put.load()) {
      if (Status s = ShipAndPoint(active, "active", std::to_string(active)); !s.ok()) {
        Failed("version " + std::to_string(active), s.ToString());
        return;
      }
      spdlog::info("versions: the pointer names version {}", active);
      pointer_put.store(active);
      pointer_gauge->Set(static_cast<double>(active));
      moved = true;
    }
    // The canary after the active version: a promotion names the candidate active first, so a
    // replica never sees the canary end before the candidate serves everyone.
    const std::string canary_text = FormatCanaryPointer(canary.version, canary.share_bp);
    if (canary_text != canary_put) {
      if (Status s = ShipAndPoint(canary.version, "canary", canary_text); !s.ok()) {
        Failed("canary version " + std::to_string(canary.version), s.ToString());
        return;
      }
      spdlog::info("versions: the canary key holds \"{}\"", canary_text);
      canary_put = canary_text;
      moved = true;
    }
    failing.clear();
    // Pruning reads every manifest of the store: only after something was shipped or moved.
    if (moved && StreamVersions(&in_stream)) Prune(in_stream, active, canary.version);
  }

  // Ships `version` (unless 0) and then puts `value` under `key` of the bucket.
  Status ShipAndPoint(uint64_t version, const char* key, const std::string& value) {
    if (version != 0) PLUMB_RETURN_IF_ERROR(Ship(version));
    uint64_t revision = 0;
    const natsStatus put = kvStore_PutString(&revision, kv, key, value.c_str());
    if (put != NATS_OK) {
      return Status::Unavailable(std::string("putting the ") + key + " key: " + NatsErrorText(put));
    }
    return Status::Ok();
  }

  void Run() {
    RunEvery(mu, wake, stopping, options.interval, [this] { Round(); });
    Disconnect();
  }

  store::Store* const store;
  const VersionShipOptions options;
  natsOptions* nats_options = nullptr;
  natsConnection* nc = nullptr;
  jsCtx* js = nullptr;
  kvStore* kv = nullptr;
  size_t chunk_bytes = 0;
  std::string failing;
  std::string canary_put;  // the canary key as last put ("" before the first)
  std::atomic<int> publish_errors{0};
  std::atomic<uint64_t> pointer_put{0};
  std::atomic<uint64_t> shipped_total{0};
  prometheus::Counter* shipped_counter = nullptr;
  prometheus::Counter* failure_counter = nullptr;
  prometheus::Gauge* pointer_gauge = nullptr;
  prometheus::Gauge* seconds_gauge = nullptr;
  std::mutex mu;
  std::condition_variable wake;
  bool stopping = false;
  std::thread thread;
};

VersionShipper::VersionShipper(store::Store* store, VersionShipOptions options,
                               prometheus::Registry* registry)
    : impl_(std::make_unique<Impl>(store, std::move(options), registry)) {}

VersionShipper::~VersionShipper() {
  Stop();
  if (impl_->nats_options != nullptr) natsOptions_Destroy(impl_->nats_options);
}

Status VersionShipper::Start() {
  if (impl_->options.stream.empty() || impl_->options.subject_prefix.empty() ||
      impl_->options.bucket.empty()) {
    return Status::InvalidArgument("versions: stream, subject prefix and bucket must be named");
  }
  PLUMB_RETURN_IF_ERROR(
      MakeNatsOptions(impl_->options.access, "plumb-train versions", &impl_->nats_options));
  impl_->thread = std::thread([this] { impl_->Run(); });
  return Status::Ok();
}

void VersionShipper::Stop() {
  {
    std::lock_guard<std::mutex> lock(impl_->mu);
    impl_->stopping = true;
  }
  impl_->wake.notify_all();
  if (impl_->thread.joinable()) impl_->thread.join();
}

std::string VersionShipper::Describe() const {
  return "stream " + impl_->options.stream + " (" + impl_->options.subject_prefix +
         ".<version>), pointer in bucket " + impl_->options.bucket;
}

uint64_t VersionShipper::shipped() const { return impl_->shipped_total.load(); }
uint64_t VersionShipper::pointer() const { return impl_->pointer_put.load(); }

}  // namespace plumb::replica
