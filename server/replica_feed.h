// ReplicaFeed: plumb-serve --replica-of. Versions come from the JetStream version stream
// that plumb-train's VersionShipper fills (replica/version_shipper.h), not from a store on
// this host's disk; they are kept in a local directory of this replica's own so that it
// restarts and serves with NATS down.
//
// Local directory (--db):
//   versions/<N>.bundle   a received version, verified (version_bundle.h format; the bundle's
//                         own CRC-32 and structure are checked again whenever it is loaded
//                         from disk: at a restart, or a rollback to it)
//   POINTER               the version to serve, decimal: the last pointer whose version is
//                         on disk here
//   CANARY                the canary to serve beside it (replica/canary_pointer.h text): the
//                         last canary key whose version is on disk here
// Files are written to a .tmp name, fsync'ed, renamed into place and the directory
// fsync'ed, so a crash leaves either the old file or the whole new one.
//
// A thread polls the pointer (key `active` of the bucket) every interval. When it names a
// version not on disk, the thread reads that version's subject from the stream (an ordered
// consumer), checks every chunk, the count, the total size and CRC (BundleAssembler) and
// decodes the bundle; only then is it written and POINTER moved. A rollback to a version on
// disk only moves POINTER. The canary key is followed the same way after the pointer: its
// version fetched when missing, then CANARY moved. A damaged version (any check fails, or the
// stream holds it without its trailer) is refused: logged, counted in
// plumb_replica_versions_refused_total{reason}, and not tried again for refused_retry; the version
// served does not change. Local bundles beyond the newest keep_local (never POINTER's or CANARY's)
// are deleted.
//
// CatchUpLoop (server/catch_up_loop.h) asks ActiveVersion() and Load()s off the request path;
// a version just received is handed over decoded, without reading the file back.
// A local file found damaged when loaded is deleted and the version fetched again while the
// pointer names it (the served version does not change meanwhile).
//
// Metrics (registry()): plumb_replica_connected, plumb_replica_pointer_version,
// plumb_replica_versions_received_total, plumb_replica_versions_refused_total{reason}.
//
// Thread safety: Open, Start and Stop from one thread; ActiveVersion and Load from the
// catch-up loop's thread; the counters from any.
#pragma once

#include <atomic>
#include <chrono>
#include <cstdint>
#include <memory>
#include <string>
#include <vector>

#include "replica/nats_access.h"
#include "server/version_feed.h"

namespace prometheus {
class Registry;
}

namespace plumb::server {

struct ReplicaOptions {
  replica::NatsAccess access;
  std::string stream = "PLUMB_VERSIONS";
  std::string subject_prefix = "plumb.versions";
  std::string bucket = "PLUMB_POINTER";
  std::string dir;  // the local directory (created when missing)
  std::chrono::milliseconds interval{500};
  // A fetch waiting this long for the stream's next message gives up (and retries).
  std::chrono::milliseconds fetch_timeout{10000};
  // A refused version is fetched again after this long (the pointer may be fixed meanwhile).
  std::chrono::milliseconds refused_retry{30000};
  uint64_t max_version_bytes = uint64_t{32} << 30;
  uint32_t keep_local = 5;
};

// Why a version was refused (the metric's label).
enum class RefusedReason { kDamaged, kMissing };

class ReplicaFeed final : public VersionFeed {
 public:
  explicit ReplicaFeed(ReplicaOptions options);
  ~ReplicaFeed() override;  // Stop()

  // Creates the directory when missing, drops leftover .tmp files and reads POINTER.
  // IoError when the directory cannot be made or read; InvalidArgument for unusable NATS
  // options.
  Status Open();
  // Starts the thread that follows the pointer. Call once, after Open.
  void Start();
  void Stop();

  Status ActiveVersion(uint64_t* version) override;
  Status Canary(uint64_t* version, uint32_t* share_bp) override;
  Status Load(uint64_t version, const ApproxServingOptions& approx,
              std::shared_ptr<const Snapshot>* out, std::vector<std::string>* withdrawn) override;

  std::shared_ptr<prometheus::Registry> registry() const;
  std::string Describe() const;
  uint64_t received() const;
  uint64_t refused() const;

 private:
  struct Impl;
  std::unique_ptr<Impl> impl_;
};

}  // namespace plumb::server
