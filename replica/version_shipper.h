// VersionShipper: plumb-train's side of remote serving replicas (README "Beyond one
// machine"). A thread watches the store's active version, like plumb-serve's catch-up
// loop, so the training loop knows nothing of it. When the active version changes (an
// activation, or a rollback to an older one):
//   1. unless the version is already in the stream (its subject's last message is an
//      intact trailer), it reads the version whole (ReadVersionBundle: manifest, matrices,
//      degrees, ids, seen items, and the items withdrawn now), encodes it, and publishes its
//      chunks and trailer (version_bundle.h) to subject `<subject_prefix>.<version>` of the
//      stream, each publish acknowledged by JetStream. A partial version left by an
//      interrupted ship is purged first. A version is shipped once: a rollback to it only
//      moves the pointer.
//   2. puts the version number (decimal text) under key `active` of the key-value bucket.
//   3. does the same for the store's canary (store::Canary): ships the candidate, then puts
//      key `canary` (replica/canary_pointer.h: "<version> <share_bp>" or "none").
//   4. purges the stream's versions beyond the newest keep_versions (never the active or the
//      canary's).
// Every round also moves the store's version numbering past the newest number the stream
// holds (Store::SkipVersionNumbers), so that a trainer restored from an older backup never
// gives a number that replicas already know to a different version.
// The stream (file storage, subjects `<subject_prefix>.>`) and the bucket are created with
// `replicas` replicas when missing. A failure (NATS down, a publish not acknowledged) is
// logged once per episode, counted, and retried every interval; the pointer never names a
// version before all of it was acknowledged.
//
// Metrics (added to the registry given): plumb_versions_shipped_total,
// plumb_version_ship_failures_total, plumb_version_pointer, plumb_version_ship_seconds.
//
// Thread safety: Start and Stop from one thread; the counters from any.
#pragma once

#include <atomic>
#include <chrono>
#include <cstdint>
#include <memory>
#include <string>

#include "core/status.h"
#include "replica/nats_access.h"

namespace prometheus {
class Registry;
}
namespace plumb::store {
class Store;
}

namespace plumb::replica {

struct VersionShipOptions {
  NatsAccess access;
  std::string stream = "PLUMB_VERSIONS";
  std::string subject_prefix = "plumb.versions";  // version N goes to <prefix>.N
  std::string bucket = "PLUMB_POINTER";           // key "active": the version to serve
  int replicas = 1;                               // of the stream and bucket when they are created
  uint32_t keep_versions = 10;  // versions kept in the stream; older ones are purged
  std::chrono::milliseconds interval{500};
  // Payload bytes per chunk at most; 0: what the server allows (its max_payload, less room
  // for the chunk header and NATS headers).
  size_t max_chunk_bytes = 0;
};

class VersionShipper {
 public:
  // `store` (a primary: the shipper may move its version numbering) and `registry` are
  // borrowed and must outlive the shipper.
  VersionShipper(store::Store* store, VersionShipOptions options, prometheus::Registry* registry);
  ~VersionShipper();  // Stop()

  // InvalidArgument for unusable options (see MakeNatsOptions); otherwise starts the thread
  // and returns OK even when no server answers yet.
  Status Start();
  void Stop();
  std::string Describe() const;

  uint64_t shipped() const;
  uint64_t pointer() const;

 private:
  struct Impl;
  std::unique_ptr<Impl> impl_;
};

}  // namespace plumb::replica
