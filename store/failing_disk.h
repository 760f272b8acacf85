// TEST ONLY — never call from a shipped binary (the target plumb_store_testing is linked
// only by tests). A primary Store whose disk a test can declare full: while the switch is
// on, every write RocksDB makes to a file of the store fails as a full disk does (an
// IOError with RocksDB's NoSpace subcode, "No space left on device"), so that tests see
// what the store reports when a write meets a full disk, beyond its own free-space check.
#pragma once

#include <atomic>
#include <memory>
#include <string>

#include "core/status.h"
#include "store/store.h"

namespace plumb::store::testing {

// Store::OpenPrimary of `dir` on a disk that is full while *full is true. The store keeps
// the switch alive.
Status OpenPrimaryOnFailingDisk(const std::string& dir, const StoreOptions& options,
                                std::shared_ptr<std::atomic<bool>> full,
                                std::unique_ptr<Store>* out);

}  // namespace plumb::store::testing
