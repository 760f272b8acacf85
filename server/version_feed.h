// VersionFeed: where CatchUpLoop takes versions from when it does not follow a store on
// the same disk (plumb-serve --replica-of: ReplicaFeed). The loop asks which version should
// be served and loads it when that differs from the serving one.
#pragma once

#include <cstdint>
#include <memory>
#include <string>
#include <vector>

#include "core/status.h"
#include "server/snapshot.h"

namespace plumb::server {

class VersionFeed {
 public:
  virtual ~VersionFeed() = default;
  // The version to serve (0: none yet). Called from the loop's thread only.
  virtual Status ActiveVersion(uint64_t* version) = 0;
  // The canary to serve beside it: *version 0 when none runs; share_bp 1..10000 otherwise.
  // Default: never a canary.
  virtual Status Canary(uint64_t* version, uint32_t* share_bp) {
    *version = 0;
    *share_bp = 0;
    return Status::Ok();
  }
  // Builds version `version`'s snapshot (with `approx`) and returns the ids of the items
  // withdrawn with it. *out unchanged on error. Called from the loop's thread only.
  virtual Status Load(uint64_t version, const ApproxServingOptions& approx,
                      std::shared_ptr<const Snapshot>* out,
                      std::vector<std::string>* withdrawn) = 0;
};

}  // namespace plumb::server
