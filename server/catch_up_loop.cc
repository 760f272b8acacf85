#include "server/catch_up_loop.h"

#include <spdlog/spdlog.h>

#include "core/run_every.h"
#include "core/thread_priority.h"
#include "store/store.h"

namespace plumb::server {

namespace {

double SecondsSince(std::chrono::steady_clock::time_point start) {
  return std::chrono::duration<double>(std::chrono::steady_clock::now() - start).count();
}

}  // namespace

CatchUpLoop::CatchUpLoop(store::Store* store, SnapshotHolder* holder, CatchUpOptions options)
    : store_(store), holder_(holder), options_(std::move(options)) {}

CatchUpLoop::CatchUpLoop(VersionFeed* feed, SnapshotHolder* holder, CatchUpOptions options)
    : store_(nullptr), feed_(feed), holder_(holder), options_(std::move(options)) {}

CatchUpLoop::~CatchUpLoop() { Stop(); }

Status CatchUpLoop::RunOnce() {
  Status damage;
  if (store_ != nullptr) PLUMB_RETURN_IF_ERROR(FollowStore(&damage));
  Status s = FollowActive();
  Status c = FollowCanary();
  if (!s.ok()) return s;
  if (!c.ok()) return c;
  return damage;
}

Status CatchUpLoop::FollowStore(Status* damage) {
  Status s = store_->CatchUp();
  if (!s.ok()) {
    // A secondary that cannot catch up keeps serving what it has; log once per new error
    // rather than every interval.
    if (s.message() != last_catch_up_error_) {
      spdlog::warn("catch-up with the primary failed: {}", s.ToString());
      last_catch_up_error_ = s.message();
    }
    return s;
  }
  if (!last_catch_up_error_.empty()) {
    spdlog::info("catch-up with the primary works again");
    last_catch_up_error_.clear();
  }

  const auto now = std::chrono::steady_clock::now();
  if (now >= next_file_check_) {
    next_file_check_ = now + options_.file_check_interval;
    *damage = store_->RecheckFiles();
    store_damaged_.store(!damage->ok(), std::memory_order_relaxed);
    if (damage->message() != last_damage_) {
      if (damage->ok()) {
        spdlog::info("the store's table files check out again");
      } else {
        spdlog::error(
            "{} Still serving {}.", damage->ToString(),
            holder_->Get() ? "version " + std::to_string(holder_->Get()->version()) : "nothing");
      }
      last_damage_ = damage->message();
    }
  }

  // The withdrawn items: re-read when their generation moved, re-mapped to a new snapshot's
  // rows after a swap (SwapIn).
  if (Status w = RefreshWithdrawn(false); !w.ok()) {
    spdlog::warn("cannot read the withdrawn items: {}", w.ToString());
  }
  return Status::Ok();
}

Status CatchUpLoop::Load(uint64_t version, std::shared_ptr<const Snapshot>* out,
                         std::vector<std::string>* withdrawn) {
  if (feed_ != nullptr) return feed_->Load(version, options_.approx, out, withdrawn);
  return LoadSnapshot(*store_, version, out, options_.approx);
}

Status CatchUpLoop::FollowActive() {
  uint64_t active = 0;
  PLUMB_RETURN_IF_ERROR(feed_ != nullptr ? feed_->ActiveVersion(&active)
                                         : store_->GetActiveVersion(&active));
  if (active == 0) {
    // Nothing to serve yet (a store: nothing published). A feed that withdrew a version may
    // offer it again, repaired: it is then tried again.
    if (feed_ != nullptr) failed_version_ = 0;
    return Status::Ok();
  }
  std::shared_ptr<const Snapshot> current = holder_->Get();
  if (current != nullptr && current->version() == active) return Status::Ok();
  if (active == failed_version_) return Status::Ok();  // already reported; wait for another

  const auto start = std::chrono::steady_clock::now();
  loads_.fetch_add(1, std::memory_order_relaxed);
  // A promoted canary's snapshot is already built; a feed's came with its withdrawn items.
  std::shared_ptr<const Snapshot> next = CanaryAs(active);
  std::vector<std::string> withdrawn;  // a feed's, of `active`
  Status s = Status::Ok();
  if (next != nullptr) {
    withdrawn = canary_withdrawn_;
  } else {
    s = Load(active, &next, &withdrawn);
  }
  const double seconds = SecondsSince(start);
  if (s.IsNotFound() && store_ != nullptr) {
    // The store names a version active that this follower cannot see: either a table file
    // is missing or damaged (the catch-up then stops short of the primary's state), or the
    // version was deleted right after being named. Say which. (A feed's NotFound is its own
    // report of a version it does not hold, worded by the feed.)
    Status files = store_->RecheckFiles();
    s = files.ok() ? Status::NotFound("the store names version " + std::to_string(active) +
                                      " active but holds no such version (" + s.message() + ")")
                   : files;
  }
  if (!s.ok()) return SkipFailedLoad(active, /*canary=*/false, s);
  failed_version_ = 0;
  // Release our reference to the old snapshot before swapping, so that its memory goes as
  // soon as the last request holding it ends.
  current.reset();
  SwapIn(active, std::move(next), std::move(withdrawn), seconds);
  return Status::Ok();
}

void CatchUpLoop::SwapIn(uint64_t active, std::shared_ptr<const Snapshot> next,
                         std::vector<std::string> withdrawn, double seconds) {
  // A feed's withdrawn items came with the version: mapped to its rows, they go in before the
  // snapshot so that no request sees the new rows with the old set's positions.
  if (feed_ != nullptr) {
    holder_->SetWithdrawn(
        std::make_shared<const WithdrawnItems>(std::move(withdrawn), active, next.get()));
  }
  std::shared_ptr<const Snapshot> previous = holder_->Swap(next);
  swaps_.fetch_add(1, std::memory_order_relaxed);
  spdlog::info("serving version {} ({} items, {} users, dim {}, {:.1f} MB) after {:.3f} s{}{}",
               next->version(), next->num_items(), next->num_users(), next->dim(),
               next->memory_bytes() / 1e6, seconds,
               next->dot_index() ? fmt::format(" (approximate indexes built in {:.1f} s)",
                                               next->approx_build_seconds())
                                 : std::string(),
               previous ? "; replaced version " + std::to_string(previous->version()) : "");
  previous.reset();
  // The store's withdrawn items are its own, kept across versions: re-mapped to the new rows.
  if (store_ != nullptr) {
    if (Status w = RefreshWithdrawn(true); !w.ok()) {
      spdlog::warn("cannot read the withdrawn items: {}", w.ToString());
    }
  }
  if (options_.on_swap) options_.on_swap(*next, seconds);
}

Status CatchUpLoop::SkipFailedLoad(uint64_t version, bool canary, const Status& s) {
  failed_loads_.fetch_add(1, std::memory_order_relaxed);
  if (canary) {
    failed_canary_ = version;
    spdlog::error("canary version {} failed to load and is not served ({})", version, s.ToString());
  } else {
    failed_version_ = version;
    std::shared_ptr<const Snapshot> current = holder_->Get();
    spdlog::error("version {} failed to load and is skipped ({}); still serving {}", version,
                  s.ToString(),
                  current ? "version " + std::to_string(current->version()) : "nothing");
  }
  if (options_.on_load_failure) options_.on_load_failure(version, s);
  return s;
}

std::shared_ptr<const Snapshot> CatchUpLoop::CanaryAs(uint64_t version) const {
  std::shared_ptr<const CanaryArm> canary = holder_->GetCanary();
  if (canary != nullptr && canary->snapshot->version() == version) return canary->snapshot;
  return nullptr;
}

Status CatchUpLoop::FollowCanary() {
  uint64_t version = 0;
  uint32_t share_bp = 0;
  if (feed_ != nullptr) {
    PLUMB_RETURN_IF_ERROR(feed_->Canary(&version, &share_bp));
  } else {
    store::Canary canary;
    PLUMB_RETURN_IF_ERROR(store_->GetCanary(&canary));
    version = canary.version;
    share_bp = canary.share_bp;
  }
  std::shared_ptr<const CanaryArm> arm = holder_->GetCanary();
  if (version == 0) {
    failed_canary_ = 0;
    if (arm != nullptr) {
      holder_->SetCanary(nullptr);
      spdlog::info("canary of version {} ended", arm->snapshot->version());
    }
    return Status::Ok();
  }
  std::shared_ptr<const Snapshot> snapshot;
  if (arm != nullptr && arm->snapshot->version() == version) {
    if (arm->share_bp == share_bp) return Status::Ok();
    snapshot = arm->snapshot;
  } else {
    if (version == failed_canary_) return Status::Ok();  // already reported
    std::shared_ptr<const Snapshot> current = holder_->Get();
    if (current != nullptr && current->version() == version) {
      snapshot = current;
    } else {
      const auto start = std::chrono::steady_clock::now();
      loads_.fetch_add(1, std::memory_order_relaxed);
      // A feed's withdrawn items of the canary are kept for a promotion; until then the
      // active version's apply.
      Status s = Load(version, &snapshot, &canary_withdrawn_);
      if (!s.ok()) return SkipFailedLoad(version, /*canary=*/true, s);
      spdlog::info("canary version {} built in {:.3f} s", version, SecondsSince(start));
    }
  }
  failed_canary_ = 0;
  auto next = std::make_shared<CanaryArm>();
  next->snapshot = std::move(snapshot);
  next->share_bp = share_bp;
  holder_->SetCanary(std::move(next));
  spdlog::info("canary: version {} serves {:.2f} % of the subjects (was {:.2f} %)", version,
               share_bp / 100.0,
               arm != nullptr && arm->snapshot->version() == version ? arm->share_bp / 100.0 : 0.0);
  return Status::Ok();
}

Status CatchUpLoop::RefreshWithdrawn(bool swapped) {
  uint64_t generation = 0, count = 0;
  PLUMB_RETURN_IF_ERROR(store_->GetAvailability(&generation, &count));
  std::shared_ptr<const WithdrawnItems> current = holder_->GetWithdrawn();
  std::shared_ptr<const Snapshot> snap = holder_->Get();
  if (current != nullptr && current->generation() == generation && !swapped) return Status::Ok();
  std::vector<std::string> ids;
  if (current != nullptr && current->generation() == generation) {
    ids = current->ids();  // same set, new snapshot: only the rows change
  } else if (count > 0) {
    std::vector<store::WithdrawnItem> items;
    PLUMB_RETURN_IF_ERROR(store_->ListWithdrawnItems("", 0, &items));
    ids.reserve(items.size());
    for (store::WithdrawnItem& item : items) ids.push_back(std::move(item.item_id));
  }
  const size_t before = current ? current->size() : 0;
  holder_->SetWithdrawn(
      std::make_shared<const WithdrawnItems>(std::move(ids), generation, snap.get()));
  if (current == nullptr || current->generation() != generation) {
    spdlog::info("withdrawn items: {} (was {}; generation {})", holder_->GetWithdrawn()->size(),
                 before, generation);
  }
  return Status::Ok();
}

void CatchUpLoop::Start(int nice) {
  thread_ = std::thread([this, nice] {
    LowerThisThreadsPriority(nice);
    Run();
  });
}

void CatchUpLoop::Stop() {
  {
    std::lock_guard<std::mutex> lock(mu_);
    stopping_ = true;
  }
  wake_.notify_all();
  if (thread_.joinable()) thread_.join();
}

void CatchUpLoop::Run() {
  // Errors are logged and counted inside RunOnce.
  RunEvery(mu_, wake_, stopping_, options_.interval, [this] { RunOnce().IgnoreError(); });
}

}  // namespace plumb::server
