#include "server/replica_feed.h"

#include <fcntl.h>
#include <nats/nats.h>
#include <prometheus/counter.h>
#include <prometheus/gauge.h>
#include <prometheus/registry.h>
#include <spdlog/spdlog.h>
#include <unistd.h>

#include <algorithm>
#include <array>
#include <charconv>
#include <condition_variable>
#include <cstring>
#include <filesystem>
#include <fstream>
#include <mutex>
#include <thread>

#include "core/run_every.h"
#include "replica/canary_pointer.h"
#include "replica/version_bundle.h"

namespace plumb::server {
namespace fs = std::filesystem;

namespace {

bool ParseVersion(std::string_view text, uint64_t* v) {
  while (!text.empty() && (text.back() == '\n' || text.back() == ' ')) text.remove_suffix(1);
  if (text.empty()) return false;
  const auto [end, ec] = std::from_chars(text.data(), text.data() + text.size(), *v);
  return ec == std::errc() && end == text.data() + text.size() && *v > 0;
}

Status Errno(const std::string& what) {
  return Status::IoError(what + ": " + std::strerror(errno));
}

Status FsyncPath(const fs::path& path, int flags) {
  const int fd = ::open(path.c_str(), flags | O_CLOEXEC);
  if (fd < 0) return Errno("cannot open " + path.string());
  const int r = ::fsync(fd);
  ::close(fd);
  if (r != 0) return Errno("cannot fsync " + path.string());
  return Status::Ok();
}

// Writes `bytes` to `path`.tmp and fsyncs it; the file is removed on error.
Status WriteTemporary(const fs::path& path, std::string_view bytes) {
  const fs::path tmp = path.string() + ".tmp";
  const int fd = ::open(tmp.c_str(), O_WRONLY | O_CREAT | O_TRUNC | O_CLOEXEC, 0644);
  if (fd < 0) return Errno("cannot create " + tmp.string());
  size_t done = 0;
  while (done < bytes.size()) {
    const ssize_t n = ::write(fd, bytes.data() + done, bytes.size() - done);
    if (n < 0) {
      if (errno == EINTR) continue;
      Status s = Errno("cannot write " + tmp.string());
      ::close(fd);
      ::unlink(tmp.c_str());
      return s;
    }
    done += static_cast<size_t>(n);
  }
  if (::fsync(fd) != 0) {
    Status s = Errno("cannot fsync " + tmp.string());
    ::close(fd);
    ::unlink(tmp.c_str());
    return s;
  }
  ::close(fd);
  return Status::Ok();
}

// Moves `path`.tmp (WriteTemporary) into place and fsyncs the directory.
Status CommitTemporary(const fs::path& path) {
  const fs::path tmp = path.string() + ".tmp";
  if (::rename(tmp.c_str(), path.c_str()) != 0) {
    Status s = Errno("cannot rename " + tmp.string());
    ::unlink(tmp.c_str());
    return s;
  }
  return FsyncPath(path.parent_path(), O_RDONLY | O_DIRECTORY);
}

// Writes `bytes` to `path` durably: a .tmp file, fsync, rename, fsync of the directory.
Status WriteDurably(const fs::path& path, std::string_view bytes) {
  PLUMB_RETURN_IF_ERROR(WriteTemporary(path, bytes));
  return CommitTemporary(path);
}

Status ReadFile(const fs::path& path, std::string* out) {
  std::ifstream in(path, std::ios::binary);
  if (!in) return Status::NotFound("cannot open " + path.string());
  in.seekg(0, std::ios::end);
  const std::streamoff size = in.tellg();
  in.seekg(0);
  out->resize(static_cast<size_t>(std::max<std::streamoff>(0, size)));
  if (!in.read(out->data(), static_cast<std::streamsize>(out->size()))) {
    return Status::IoError("cannot read " + path.string());
  }
  return Status::Ok();
}

}  // namespace

struct ReplicaFeed::Impl {
  explicit Impl(ReplicaOptions o)
      : options(std::move(o)), registry(std::make_shared<prometheus::Registry>()) {
    connected_gauge = &prometheus::BuildGauge()
                           .Name("plumb_replica_connected")
                           .Help("1 while this replica is connected to NATS and reads the pointer")
                           .Register(*registry)
                           .Add({});
    pointer_gauge = &prometheus::BuildGauge()
                         .Name("plumb_replica_pointer_version")
                         .Help("The version the pointer last named (0: not read yet)")
                         .Register(*registry)
                         .Add({});
    received_counter = &prometheus::BuildCounter()
                            .Name("plumb_replica_versions_received_total")
                            .Help("Versions fetched from the stream, verified and written locally")
                            .Register(*registry)
                            .Add({});
    auto& refused_family =
        prometheus::BuildCounter()
            .Name("plumb_replica_versions_refused_total")
            .Help(
                "Versions the pointer named that were refused: damaged (a chunk, the size or "
                "a checksum is wrong, or the stream holds them without their trailer) or "
                "missing from the stream")
            .Register(*registry);
    refused_counters[0] = &refused_family.Add({{"reason", "damaged"}});
    refused_counters[1] = &refused_family.Add({{"reason", "missing"}});
  }

  fs::path BundlePath(uint64_t v) const {
    return fs::path(options.dir) / "versions" / (std::to_string(v) + ".bundle");
  }

  // ---- NATS side (the feed's thread) --------------------------------------------------
  bool Connect() {
    const char* step = "";
    const natsStatus s =
        static_cast<natsStatus>(replica::ConnectJetStream(nats_options, nullptr, &nc, &js, &step));
    if (s != NATS_OK) return Failed(step, s);
    spdlog::info("replica: connected to {}; following bucket {} and stream {}",
                 replica::ConnectedUrl(nc), options.bucket, options.stream);
    return true;
  }

  bool Failed(const std::string& what, natsStatus s) {
    const std::string text = what + ": " + replica::NatsErrorText(s);
    if (text != failing) spdlog::warn("replica: {}; still serving what is on disk, retrying", text);
    failing = text;
    Disconnect();
    return false;
  }

  void Disconnect() {
    if (kv != nullptr) kvStore_Destroy(kv);
    kv = nullptr;
    replica::CloseNats(&nc, &js);
    connected_gauge->Set(0);
  }

  // Reads version v's messages from the stream into verified bundle bytes.
  Status Fetch(uint64_t v, std::string* bundle) {
    const std::string subject = options.subject_prefix + "." + std::to_string(v);
    natsMsg* last = nullptr;
    jsErrCode jerr = static_cast<jsErrCode>(0);
    natsStatus s =
        js_GetLastMsg(&last, js, options.stream.c_str(), subject.c_str(), nullptr, &jerr);
    if (s == NATS_NOT_FOUND) {
      return Status::NotFound("stream " + options.stream + " holds nothing on " + subject);
    }
    if (s != NATS_OK)
      return Status::Unavailable("reading " + subject + ": " + replica::NatsErrorText(s));
    // The last message is the trailer of a whole version: its total sizes the buffer.
    replica::Trailer trailer;
    const bool has_trailer =
        replica::ParseTrailer(std::string_view(natsMsg_GetData(last), natsMsg_GetDataLength(last)),
                              &trailer)
            .ok() &&
        trailer.version == v;
    natsMsg_Destroy(last);

    jsSubOptions so;
    jsSubOptions_Init(&so);
    so.Stream = options.stream.c_str();
    so.Ordered = true;
    natsSubscription* sub = nullptr;
    s = js_SubscribeSync(&sub, js, subject.c_str(), nullptr, &so, &jerr);
    if (s != NATS_OK) {
      return Status::Unavailable("subscribing to " + subject + ": " + replica::NatsErrorText(s));
    }
    natsSubscription_SetPendingLimits(sub, -1, -1);
    replica::BundleAssembler assembler(v, options.max_version_bytes);
    if (has_trailer) assembler.Reserve(trailer.total_bytes);
    Status result = Status::Unavailable("no trailer");
    while (true) {
      natsMsg* msg = nullptr;
      s = natsSubscription_NextMsg(&msg, sub, static_cast<int64_t>(options.fetch_timeout.count()));
      if (s != NATS_OK) {
        result = Status::Unavailable("waiting for " + subject +
                                     "'s next message: " + replica::NatsErrorText(s));
        break;
      }
      const std::string_view data(natsMsg_GetData(msg), natsMsg_GetDataLength(msg));
      uint64_t pending = 1;
      jsMsgMetaData* meta = nullptr;
      if (natsMsg_GetMetaData(&meta, msg) == NATS_OK) {
        pending = meta->NumPending;
        jsMsgMetaData_Destroy(meta);
      }
      if (replica::IsTrailer(data)) {
        result = assembler.Finish(data, bundle);
        natsMsg_Destroy(msg);
        break;
      }
      result = assembler.Add(data);
      natsMsg_Destroy(msg);
      if (!result.ok()) break;
      if (pending == 0) {
        result = Status::Corruption("version " + std::to_string(v) +
                                    ": the stream holds it without its trailer");
        break;
      }
    }
    natsSubscription_Unsubscribe(sub);
    natsSubscription_Destroy(sub);
    return result;
  }

  void Refuse(uint64_t v, RefusedReason reason, const Status& why) {
    refused_counters[static_cast<int>(reason)]->Increment();
    refused_total.fetch_add(1);
    refused_version = v;
    refused_until = std::chrono::steady_clock::now() + options.refused_retry;
    spdlog::error(
        "replica: refused version {} ({}); still serving {}", v, why.ToString(),
        local_active.load() ? "version " + std::to_string(local_active.load()) : "nothing");
  }

  Status SetPointer(uint64_t v) {
    if (local_active.load() == v) return Status::Ok();
    PLUMB_RETURN_IF_ERROR(
        WriteDurably(fs::path(options.dir) / "POINTER", std::to_string(v) + "\n"));
    local_active.store(v);
    return Status::Ok();
  }

  void PruneLocal() {
    std::vector<uint64_t> kept;
    std::error_code ec;
    for (const auto& entry : fs::directory_iterator(fs::path(options.dir) / "versions", ec)) {
      uint64_t v = 0;
      if (entry.path().extension() == ".bundle" && ParseVersion(entry.path().stem().string(), &v)) {
        kept.push_back(v);
      }
    }
    std::sort(kept.rbegin(), kept.rend());
    for (size_t i = options.keep_local; i < kept.size(); ++i) {
      if (kept[i] == local_active.load()) continue;
      {
        std::lock_guard<std::mutex> lock(canary_mu);
        if (kept[i] == canary_version) continue;
      }
      fs::remove(BundlePath(kept[i]), ec);
    }
  }

  // True when version v is on this disk, fetched now if it was not; false (logged, counted)
  // when it could not be fetched or was refused.
  bool Have(uint64_t v) {
    std::error_code ec;
    if (!fs::exists(BundlePath(v), ec)) {
      if (v == refused_version && std::chrono::steady_clock::now() < refused_until) return false;
      std::string bytes;
      const auto start = std::chrono::steady_clock::now();
      Status f = Fetch(v, &bytes);
      const auto fetched = std::chrono::steady_clock::now();
      auto decoded = std::make_shared<replica::VersionBundle>();
      Status written = Status::Ok();
      if (f.ok()) {
        // The bytes passed every chunk's and the total CRC: write them (to the .tmp name)
        // while they are decoded, and move the file into place only if they decode.
        std::thread writer([&] { written = WriteTemporary(BundlePath(v), bytes); });
        f = replica::DecodeBundle(bytes, decoded.get());
        if (f.ok() && decoded->version != v) {
          f = Status::Corruption("the bundle names version " + std::to_string(decoded->version));
        }
        writer.join();
        if (f.ok() && written.ok()) written = CommitTemporary(BundlePath(v));
        if (!f.ok() && written.ok()) {
          std::error_code ec;
          fs::remove(BundlePath(v).string() + ".tmp", ec);
        }
      }
      if (f.IsNotFound()) {
        Refuse(v, RefusedReason::kMissing, f);
        return false;
      }
      if (f.IsCorruption()) {
        Refuse(v, RefusedReason::kDamaged, f);
        return false;
      }
      if (!f.ok()) {
        spdlog::warn("replica: fetching version {}: {}; retrying", v, f.ToString());
        return false;
      }
      if (!written.ok()) {
        spdlog::error("replica: cannot keep version {}: {}", v, written.ToString());
        return false;
      }
      received_counter->Increment();
      received_total.fetch_add(1);
      const auto now = std::chrono::steady_clock::now();
      auto secs = [](auto a, auto b) { return std::chrono::duration<double>(b - a).count(); };
      spdlog::info(
          "replica: received version {} ({:.1f} MB) in {:.2f} s (fetch {:.2f} s, then decode "
          "and write {:.2f} s)",
          v, bytes.size() / 1e6, secs(start, now), secs(start, fetched), secs(fetched, now));
      std::string().swap(bytes);
      {
        // The catch-up thread builds from this copy rather than reading the file back.
        std::lock_guard<std::mutex> lock(fresh_mu);
        fresh = std::move(decoded);
      }
    }
    return true;
  }

  void Round() {
    if (nc == nullptr && !Connect()) return;
    if (kv == nullptr) {
      natsStatus s = js_KeyValue(&kv, js, options.bucket.c_str());
      if (s != NATS_OK) {
        kv = nullptr;
        const std::string text = "bucket " + options.bucket + ": " + replica::NatsErrorText(s);
        if (text != failing) spdlog::warn("replica: {}; retrying", text);
        failing = text;
        if (s != NATS_NOT_FOUND) Disconnect();
        return;
      }
    }
    kvEntry* entry = nullptr;
    natsStatus s = kvStore_Get(&entry, kv, "active");
    if (s == NATS_NOT_FOUND) {
      connected_gauge->Set(1);
      return;  // nothing shipped yet
    }
    if (s != NATS_OK) {
      Failed("reading the pointer", s);
      return;
    }
    connected_gauge->Set(1);
    if (!failing.empty()) spdlog::info("replica: reading the pointer again");
    failing.clear();
    uint64_t v = 0;
    const bool parsed = ParseVersion(kvEntry_ValueString(entry), &v);
    kvEntry_Destroy(entry);
    if (!parsed) {
      if (refused_version != UINT64_MAX) {
        spdlog::error("replica: the pointer holds no version number");
        refused_version = UINT64_MAX;
      }
      return;
    }
    pointer_gauge->Set(static_cast<double>(v));
    if (!Have(v)) return;
    if (Status p = SetPointer(v); !p.ok()) {
      spdlog::error("replica: cannot move the local pointer to {}: {}", v, p.ToString());
      return;
    }
    FollowCanaryKey();
    PruneLocal();
  }

  // The canary key: its version fetched like the active one, then the local CANARY file moved.
  void FollowCanaryKey() {
    kvEntry* entry = nullptr;
    uint64_t v = 0;
    uint32_t share_bp = 0;
    natsStatus s = kvStore_Get(&entry, kv, "canary");
    if (s == NATS_OK) {
      const bool parsed = replica::ParseCanaryPointer(kvEntry_ValueString(entry), &v, &share_bp);
      kvEntry_Destroy(entry);
      if (!parsed) {
        if (!canary_unreadable) spdlog::error("replica: the canary key holds no canary");
        canary_unreadable = true;
        return;
      }
      canary_unreadable = false;
    } else if (s != NATS_NOT_FOUND) {
      Failed("reading the canary key", s);
      return;
    }
    if (v != 0 && !Have(v)) return;
    if (Status c = SetCanary(v, share_bp); !c.ok()) {
      spdlog::error("replica: cannot move the local canary to {}: {}", v, c.ToString());
    }
  }

  Status SetCanary(uint64_t v, uint32_t share_bp) {
    {
      std::lock_guard<std::mutex> lock(canary_mu);
      if (canary_version == v && canary_share_bp == share_bp) return Status::Ok();
    }
    PLUMB_RETURN_IF_ERROR(WriteDurably(fs::path(options.dir) / "CANARY",
                                       replica::FormatCanaryPointer(v, share_bp) + "\n"));
    std::lock_guard<std::mutex> lock(canary_mu);
    canary_version = v;
    canary_share_bp = share_bp;
    return Status::Ok();
  }

  void Run() {
    RunEvery(mu, wake, stopping, options.interval, [this] { Round(); });
    Disconnect();
  }

  const ReplicaOptions options;
  std::shared_ptr<prometheus::Registry> registry;
  prometheus::Gauge* connected_gauge = nullptr;
  prometheus::Gauge* pointer_gauge = nullptr;
  prometheus::Counter* received_counter = nullptr;
  std::array<prometheus::Counter*, 2> refused_counters{};
  std::atomic<uint64_t> received_total{0}, refused_total{0};
  std::atomic<uint64_t> local_active{0};
  // The version last received, decoded, until the catch-up thread takes it (or another
  // replaces it).
  std::mutex fresh_mu;
  std::shared_ptr<replica::VersionBundle> fresh;

  natsOptions* nats_options = nullptr;
  natsConnection* nc = nullptr;
  jsCtx* js = nullptr;
  kvStore* kv = nullptr;
  std::string failing;
  bool canary_unreadable = false;
  // The canary as the CANARY file holds it (0: none); its bundle is on disk.
  mutable std::mutex canary_mu;
  uint64_t canary_version = 0;
  uint32_t canary_share_bp = 0;
  uint64_t refused_version = 0;
  std::chrono::steady_clock::time_point refused_until{};

  std::mutex mu;
  std::condition_variable wake;
  bool stopping = false;
  std::thread thread;
};

ReplicaFeed::ReplicaFeed(ReplicaOptions options)
    : impl_(std::make_unique<Impl>(std::move(options))) {}

ReplicaFeed::~ReplicaFeed() {
  Stop();
  if (impl_->nats_options != nullptr) natsOptions_Destroy(impl_->nats_options);
}

Status ReplicaFeed::Open() {
  const fs::path dir(impl_->options.dir);
  std::error_code ec;
  fs::create_directories(dir / "versions", ec);
  if (ec)
    return Status::IoError("cannot create " + (dir / "versions").string() + ": " + ec.message());
  for (const auto& entry : fs::directory_iterator(dir / "versions", ec)) {
    if (entry.path().extension() == ".tmp") fs::remove(entry.path(), ec);
  }
  std::string text;
  uint64_t v = 0;
  if (ReadFile(dir / "POINTER", &text).ok()) {
    if (ParseVersion(text, &v) && fs::exists(impl_->BundlePath(v), ec)) {
      impl_->local_active.store(v);
      spdlog::info("replica: {} names version {}, on disk", (dir / "POINTER").string(), v);
    } else {
      spdlog::warn("replica: {} names no version on disk; waiting for the pointer",
                   (dir / "POINTER").string());
    }
  }
  if (ReadFile(dir / "CANARY", &text).ok()) {
    uint32_t share_bp = 0;
    if (replica::ParseCanaryPointer(text, &v, &share_bp) && v != 0 &&
        fs::exists(impl_->BundlePath(v), ec)) {
      impl_->canary_version = v;
      impl_->canary_share_bp = share_bp;
      spdlog::info("replica: {} names canary version {} at {:.2f} %, on disk",
                   (dir / "CANARY").string(), v, share_bp / 100.0);
    }
  }
  return replica::MakeNatsOptions(impl_->options.access, "plumb-serve replica",
                                  &impl_->nats_options);
}

void ReplicaFeed::Start() {
  impl_->thread = std::thread([this] { impl_->Run(); });
}

void ReplicaFeed::Stop() {
  {
    std::lock_guard<std::mutex> lock(impl_->mu);
    impl_->stopping = true;
  }
  impl_->wake.notify_all();
  if (impl_->thread.joinable()) impl_->thread.join();
}

Status ReplicaFeed::ActiveVersion(uint64_t* version) {
  *version = impl_->local_active.load();
  return Status::Ok();
}

Status ReplicaFeed::Canary(uint64_t* version, uint32_t* share_bp) {
  std::lock_guard<std::mutex> lock(impl_->canary_mu);
  *version = impl_->canary_version;
  *share_bp = impl_->canary_share_bp;
  return Status::Ok();
}

Status ReplicaFeed::Load(uint64_t version, const ApproxServingOptions& approx,
                         std::shared_ptr<const Snapshot>* out,
                         std::vector<std::string>* withdrawn) {
  std::shared_ptr<replica::VersionBundle> fresh;
  {
    std::lock_guard<std::mutex> lock(impl_->fresh_mu);
    if (impl_->fresh != nullptr && impl_->fresh->version == version)
      fresh = std::move(impl_->fresh);
    impl_->fresh.reset();
  }
  replica::VersionBundle bundle;
  if (fresh != nullptr) {
    bundle = std::move(*fresh);
    fresh.reset();
  } else {
    std::string bytes;
    PLUMB_RETURN_IF_ERROR(ReadFile(impl_->BundlePath(version), &bytes));
    Status decoded = replica::DecodeBundle(bytes, &bundle);
    if (!decoded.ok()) {
      // Damaged on this disk: drop the file, so that the feed's thread fetches the version
      // again while the pointer names it (ActiveVersion says 0 until then).
      std::error_code ec;
      fs::remove(impl_->BundlePath(version), ec);
      uint64_t expected = version;
      impl_->local_active.compare_exchange_strong(expected, 0);
      return decoded;
    }
  }
  if (bundle.version != version) {
    return Status::Corruption("the local bundle of version " + std::to_string(version) +
                              " names version " + std::to_string(bundle.version));
  }
  SnapshotParts parts;
  parts.version = version;
  parts.created_ms = bundle.created_ms;
  parts.items = std::move(bundle.items);
  parts.users = std::move(bundle.users);
  parts.item_ids = std::move(bundle.item_ids);
  parts.user_ids = std::move(bundle.user_ids);
  parts.item_degrees.assign(bundle.item_degrees.begin(), bundle.item_degrees.end());
  parts.seen_offsets = std::move(bundle.seen_offsets);
  parts.seen_items = std::move(bundle.seen_items);
  parts.target_group_shares = std::move(bundle.target_group_shares);
  parts.approx = approx;
  PLUMB_RETURN_IF_ERROR(Snapshot::Build(std::move(parts), out));
  *withdrawn = std::move(bundle.withdrawn_items);
  return Status::Ok();
}

std::shared_ptr<prometheus::Registry> ReplicaFeed::registry() const { return impl_->registry; }

std::string ReplicaFeed::Describe() const {
  std::string servers;
  for (const std::string& s : impl_->options.access.servers)
    servers += (servers.empty() ? "" : ",") + s;
  return "pointer " + impl_->options.bucket + "/active, stream " + impl_->options.stream + " via " +
         servers + "; local directory " + impl_->options.dir;
}

uint64_t ReplicaFeed::received() const { return impl_->received_total.load(); }
uint64_t ReplicaFeed::refused() const { return impl_->refused_total.load(); }

}  // namespace plumb::server
