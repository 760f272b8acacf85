#include "server/catch_up_loop.h"

#include <spdlog/spdlog.h>

#include "core/run_every.h"
#include "core/thread_priority.h"
#include "store/store.h"

namespace plumb::server {

CatchUpLoop::CatchUpLoop(store::Store* store, SnapshotHolder* holder, CatchUpOptions options)
    : store_(store), holder_(holder), options_(std::move(options)) {}

CatchUpLoop::CatchUpLoop(VersionFeed* feed, SnapshotHolder* holder, CatchUpOptions options)
    : store_(nullptr), feed_(feed), holder_(holder), options_(std::move(options)) {}

Status CatchUpLoop::SkipFailedLoad(uint64_t active, const Snapshot* current, const Status& s) {
  failed_version_ = active;
  failed_loads_.fetch_add(1, std::memory_order_relaxed);
  spdlog::error("version {} failed to load and is skipped ({}); still serving {}", active,
                s.ToString(),
                current ? "version " + std::to_string(current->version()) : "nothing");
  if (options_.on_load_failure) options_.on_load_failure(active, s);
  return s;
}

Status CatchUpLoop::RunFeedOnce() {
  uint64_t active = 0;
  PLUMB_RETURN_IF_ERROR(feed_->ActiveVersion(&active));
  if (active == 0) {
    failed_version_ = 0;  // a feed that withdrew a version may offer it again, repaired
    return Status::Ok();
  }
  std::shared_ptr<const Snapshot> current = holder_->Get();
  if (current != nullptr && current->version() == active) return Status::Ok();
  if (active == failed_version_) return Status::Ok();  // already reported; wait for another
  const auto start = std::chrono::steady_clock::now();
  loads_.fetch_add(1, std::memory_order_relaxed);
  std::shared_ptr<const Snapshot> next;
  std::vector<std::string> withdrawn;
  Status s = feed_->Load(active, options_.approx, &next, &withdrawn);
  const double seconds =
      std::chrono::duration<double>(std::chrono::steady_clock::now() - start).count();
  if (!s.ok()) return SkipFailedLoad(active, current.get(), s);
  failed_version_ = 0;
  current.reset();
  // The version's own withdrawn items, mapped to its rows, go in before the snapshot so that
  // no request sees the new rows with the old set's positions.
  holder_->SetWithdrawn(
      std::make_shared<const WithdrawnItems>(std::move(withdrawn), active, next.get()));
  std::shared_ptr<const Snapshot> previous = holder_->Swap(next);
  swaps_.fetch_add(1, std::memory_order_relaxed);
  spdlog::info("serving version {} ({} items, {} users, dim {}, {:.1f} MB) after {:.3f} s{}",
               next->version(), next->num_items(), next->num_users(), next->dim(),
               next->memory_bytes() / 1e6, seconds,
               previous ? "; replaced version " + std::to_string(previous->version()) : "");
  previous.reset();
  if (options_.on_swap) options_.on_swap(*next, seconds);
  return Status::Ok();
}

CatchUpLoop::~CatchUpLoop() { Stop(); }

Status CatchUpLoop::RunOnce() {
  if (feed_ != nullptr) return RunFeedOnce();
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

  Status damage;
  const auto now = std::chrono::steady_clock::now();
  if (now >= next_file_check_) {
    next_file_check_ = now + options_.file_check_interval;
    damage = store_->RecheckFiles();
    store_damaged_.store(!damage.ok(), std::memory_order_relaxed);
    if (damage.message() != last_damage_) {
      if (damage.ok()) {
        spdlog::info("the store's table files check out again");
      } else {
        spdlog::error(
            "{} Still serving {}.", damage.ToString(),
            holder_->Get() ? "version " + std::to_string(holder_->Get()->version()) : "nothing");
      }
      last_damage_ = damage.message();
    }
  }

  // The withdrawn items: re-read when their generation moved, re-mapped to a new snapshot's
  // rows after a swap (below).
  if (Status w = RefreshWithdrawn(false); !w.ok()) {
    spdlog::warn("cannot read the withdrawn items: {}", w.ToString());
  }

  uint64_t active = 0;
  PLUMB_RETURN_IF_ERROR(store_->GetActiveVersion(&active));
  if (active == 0) return damage;  // nothing published yet
  std::shared_ptr<const Snapshot> current = holder_->Get();
  if (current != nullptr && current->version() == active) return damage;
  if (active == failed_version_) return damage;  // already reported; wait for another

  const auto start = std::chrono::steady_clock::now();
  loads_.fetch_add(1, std::memory_order_relaxed);
  std::shared_ptr<const Snapshot> next;
  s = LoadSnapshot(*store_, active, &next, options_.approx);
  const double seconds =
      std::chrono::duration<double>(std::chrono::steady_clock::now() - start).count();
  if (s.IsNotFound()) {
    // The store names a version active that this follower cannot see: either a table file
    // is missing or damaged (the catch-up then stops short of the primary's state), or the
    // version was deleted right after being named. Say which.
    Status files = store_->RecheckFiles();
    s = files.ok() ? Status::NotFound("the store names version " + std::to_string(active) +
                                      " active but holds no such version (" + s.message() + ")")
                   : files;
  }
  if (!s.ok()) return SkipFailedLoad(active, current.get(), s);
  failed_version_ = 0;
  // Release our reference to the old snapshot before swapping, so that its memory goes as
  // soon as the last request holding it ends.
  current.reset();
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
  if (Status w = RefreshWithdrawn(true); !w.ok()) {
    spdlog::warn("cannot read the withdrawn items: {}", w.ToString());
  }
  if (options_.on_swap) options_.on_swap(*next, seconds);
  return damage;
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
