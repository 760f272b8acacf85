// Store::Commit and Store::Activate: one atomic write of a state change, with the version
// it publishes, the activation and the pruning of versions no longer kept.
#include <algorithm>

#include "store/keys.h"
#include "store/records.h"
#include "store/store_impl.h"

namespace plumb::store {

using namespace internal;

namespace {

Status CheckMatrix(const MatrixView& view, uint32_t rows, uint32_t dim, std::string_view name) {
  if (view.rows != rows || view.dim != dim) {
    return Status::InvalidArgument(std::string(name) + " matrix is " + std::to_string(view.rows) +
                                   " x " + std::to_string(view.dim) + "; the manifest says " +
                                   std::to_string(rows) + " x " + std::to_string(dim));
  }
  if (view.data == nullptr && uint64_t{rows} * dim > 0) {
    return Status::InvalidArgument(std::string(name) + " matrix has no data");
  }
  return Status::Ok();
}

// Puts `rows` rows of `row_bytes` bytes each as blocks of rows_per_block rows.
void PutBlocks(rocksdb::WriteBatch* batch, rocksdb::ColumnFamilyHandle* cf, const char* data,
               uint64_t rows, uint64_t row_bytes, uint32_t rows_per_block,
               const std::function<std::string(uint32_t)>& key_of) {
  const uint64_t blocks = BlockCount(rows, rows_per_block);
  for (uint64_t b = 0; b < blocks; ++b) {
    const uint64_t first = b * rows_per_block;
    const uint64_t n = std::min<uint64_t>(rows_per_block, rows - first);
    batch->Put(cf, AsSlice(key_of(static_cast<uint32_t>(b))),
               rocksdb::Slice(data + first * row_bytes, n * row_bytes));
  }
}

}  // namespace

Status Store::Impl::ValidateChange(const StateChange& change, CommitPlan* plan) const {
  const uint32_t users_before = user_count.load();
  const uint32_t items_before = item_count.load();
  PLUMB_RETURN_IF_ERROR(CheckNewIds(IdSpace::kUser, users_before, change.new_users));
  PLUMB_RETURN_IF_ERROR(CheckNewIds(IdSpace::kItem, items_before, change.new_items));
  const uint32_t users_after = users_before + static_cast<uint32_t>(change.new_users.size());
  const uint32_t items_after = items_before + static_cast<uint32_t>(change.new_items.size());
  plan->users_after = users_after;
  plan->items_after = items_after;

  for (const auto& [user, item] : change.new_interactions) {
    if (user >= users_after || item >= items_after) {
      return Status::InvalidArgument("interaction (" + std::to_string(user) + ", " +
                                     std::to_string(item) + ") names an unknown user or item (" +
                                     std::to_string(users_after) + " users, " +
                                     std::to_string(items_after) + " items)");
    }
  }
  for (const auto& [item, degree] : change.item_degrees) {
    if (item >= items_after) {
      return Status::InvalidArgument("degree for unknown item " + std::to_string(item) + " (" +
                                     std::to_string(items_after) + " items)");
    }
  }
  if (change.cursor && *change.cursor > last_seq.load()) {
    return Status::InvalidArgument("cursor " + std::to_string(*change.cursor) +
                                   " is beyond the end of the event log (" +
                                   std::to_string(last_seq.load()) + ")");
  }
  for (const auto& [key, value] : change.meta) {
    if (key.empty()) return Status::InvalidArgument("meta key is empty");
    if (key.starts_with(keys::kReservedMetaPrefix)) {
      return Status::InvalidArgument("meta key '" + key + "' uses the reserved prefix 'plumb.'");
    }
  }

  if (change.version == nullptr) {
    if (change.activate_published) {
      return Status::InvalidArgument("activate_published without a version");
    }
    return Status::Ok();
  }
  const VersionWrite& v = *change.version;
  const VersionManifest& manifest = v.manifest;
  if (manifest.dim == 0) return Status::InvalidArgument("version dimension is 0");
  PLUMB_RETURN_IF_ERROR(CheckMatrix(v.users, manifest.num_users, manifest.dim, "users"));
  PLUMB_RETURN_IF_ERROR(CheckMatrix(v.items, manifest.num_items, manifest.dim, "items"));
  if (v.item_degrees.size() != manifest.num_items) {
    return Status::InvalidArgument("version has " + std::to_string(v.item_degrees.size()) +
                                   " item degrees for " + std::to_string(manifest.num_items) +
                                   " items");
  }
  if (manifest.num_users > users_after || manifest.num_items > items_after) {
    return Status::InvalidArgument("version has " + std::to_string(manifest.num_users) +
                                   " users and " + std::to_string(manifest.num_items) +
                                   " items; the dictionaries hold " + std::to_string(users_after) +
                                   " and " + std::to_string(items_after));
  }
  if (static_cast<int>(manifest.gate) < static_cast<int>(GateOutcome::kUnspecified) ||
      static_cast<int>(manifest.gate) > static_cast<int>(GateOutcome::kSkipped)) {
    return Status::InvalidArgument("version has an unknown gate outcome");
  }
  if (manifest.created_ms < 0) return Status::InvalidArgument("version created_ms is negative");
  return Status::Ok();
}

Status Store::Impl::NumberVersion(const StateChange& change, CommitPlan* plan) const {
  if (change.version == nullptr) return Status::Ok();
  VersionManifest& manifest = plan->manifest;
  manifest = change.version->manifest;
  if (manifest.created_ms == 0) manifest.created_ms = NowMs();
  if (manifest.version == 0) {
    manifest.version = next_version;
  } else if (manifest.version < next_version) {
    return Status::InvalidArgument("version " + std::to_string(manifest.version) +
                                   " is not newer than every version published so far (next " +
                                   std::to_string(next_version) + ")");
  }
  plan->version = manifest.version;
  return Status::Ok();
}

Status Store::Impl::CheckActivatable(const rocksdb::ReadOptions& ro, uint64_t version) const {
  Status s = CheckComplete(ro, version);
  if (s.ok() || s.IsNotFound()) return s;
  return Status::FailedPrecondition("cannot activate version " + std::to_string(version) + ": " +
                                    s.message());
}

Status Store::Impl::ChooseActive(const rocksdb::ReadOptions& ro, const StateChange& change,
                                 CommitPlan* plan) const {
  PLUMB_RETURN_IF_ERROR(ActiveVersion(ro, &plan->active));
  plan->new_active = plan->active;
  if (change.activate_published) {
    plan->new_active = plan->version;
  } else if (change.activate) {
    PLUMB_RETURN_IF_ERROR(CheckActivatable(ro, *change.activate));
    plan->new_active = *change.activate;
  }
  return Status::Ok();
}

Status Store::Impl::ChooseCanary(const rocksdb::ReadOptions& ro, const StateChange& change,
                                 CommitPlan* plan) const {
  PLUMB_RETURN_IF_ERROR(ReadCanary(ro, &plan->canary));
  plan->new_canary = plan->canary;
  if (change.canary) {
    const Canary& asked = *change.canary;
    if (asked.version == 0) {
      plan->new_canary = Canary{};
    } else {
      if (asked.share_bp == 0 || asked.share_bp > 10000) {
        return Status::InvalidArgument(
            "a canary's share must be 1..10000 basis points (0.01 % .. "
            "100 %), got " +
            std::to_string(asked.share_bp));
      }
      if (asked.version == plan->new_active) {
        return Status::FailedPrecondition("version " + std::to_string(asked.version) +
                                          " is the active version; a canary needs another one");
      }
      Status s = CheckComplete(ro, asked.version);
      if (s.IsNotFound()) return s;
      if (!s.ok()) {
        return Status::FailedPrecondition("cannot serve version " + std::to_string(asked.version) +
                                          " as a canary: " + s.message());
      }
      plan->new_canary = asked;
      if (asked.version == plan->canary.version) {
        plan->new_canary.started_ms = plan->canary.started_ms;
      } else if (plan->new_canary.started_ms == 0) {
        plan->new_canary.started_ms = NowMs();
      }
    }
  }
  // Activating the candidate promotes it: the canary ends in the same write.
  if (plan->new_canary.version != 0 && plan->new_canary.version == plan->new_active) {
    plan->new_canary = Canary{};
  }
  return Status::Ok();
}

void Store::Impl::PutCanary(const Canary& canary, rocksdb::WriteBatch* batch) const {
  if (canary.version == 0) {
    batch->Delete(meta, AsSlice(keys::kMetaCanary));
    return;
  }
  const std::string value = keys::Fixed64(canary.version) + keys::Fixed32(canary.share_bp) +
                            keys::Fixed64(static_cast<uint64_t>(canary.started_ms));
  batch->Put(meta, AsSlice(keys::kMetaCanary), AsSlice(value));
}

void Store::Impl::PutState(const StateChange& change, rocksdb::WriteBatch* batch) const {
  for (IdSpace space : {IdSpace::kUser, IdSpace::kItem}) {
    for (const auto& [index, external] :
         space == IdSpace::kUser ? change.new_users : change.new_items) {
      batch->Put(ids, AsSlice(keys::IdByExternalKey(space, external)),
                 AsSlice(keys::Fixed32(index)));
      batch->Put(ids, AsSlice(keys::ExternalByIdKey(space, index)), AsSlice(external));
    }
  }
  for (const auto& [user, item] : change.new_interactions) {
    batch->Put(interactions, AsSlice(keys::InteractionKey(user, item)), rocksdb::Slice());
  }
  for (const auto& [item, degree] : change.item_degrees) {
    batch->Put(degrees, AsSlice(keys::DegreeKey(item)), AsSlice(keys::Fixed32(degree)));
  }
  if (change.cursor) {
    batch->Put(meta, AsSlice(keys::kMetaCursor), AsSlice(keys::Fixed64(*change.cursor)));
  }
  for (const auto& [key, value] : change.meta) batch->Put(meta, AsSlice(key), AsSlice(value));
}

void Store::Impl::PutVersion(const CommitPlan& plan, const VersionWrite& v,
                             rocksdb::WriteBatch* batch) const {
  const VersionManifest& manifest = plan.manifest;
  const uint64_t version = plan.version;
  const uint32_t rpb = options.rows_per_block;
  const uint64_t row_bytes = uint64_t{manifest.dim} * sizeof(float);
  batch->Put(models, AsSlice(keys::ManifestKey(version)),
             AsSlice(records::EncodeManifest(manifest, rpb)));
  PutBlocks(batch, models, reinterpret_cast<const char*>(v.users.data), manifest.num_users,
            row_bytes, rpb,
            [&](uint32_t b) { return keys::BlockKey(version, MatrixKind::kUsers, b); });
  PutBlocks(batch, models, reinterpret_cast<const char*>(v.items.data), manifest.num_items,
            row_bytes, rpb,
            [&](uint32_t b) { return keys::BlockKey(version, MatrixKind::kItems, b); });
  PutBlocks(batch, models, reinterpret_cast<const char*>(v.item_degrees.data()), manifest.num_items,
            sizeof(uint32_t), rpb, [&](uint32_t b) { return keys::VersionDegreesKey(version, b); });
  batch->Put(meta, AsSlice(keys::kMetaNextVersion), AsSlice(keys::Fixed64(version + 1)));
}

Status Store::Impl::PruneVersions(const rocksdb::ReadOptions& ro, const CommitPlan& plan,
                                  rocksdb::WriteBatch* batch) const {
  // Keep the newest keep_versions versions, every version younger than
  // keep_versions_for_ms, and the active and pinned ones whatever their rank or age.
  std::vector<uint64_t> versions;
  PLUMB_RETURN_IF_ERROR(ListVersionNumbers(ro, &versions));
  versions.push_back(plan.version);
  std::sort(versions.rbegin(), versions.rend());
  std::set<uint64_t> pinned;
  PLUMB_RETURN_IF_ERROR(PinnedVersions(ro, &pinned));
  const int64_t now_ms = NowMs();
  for (size_t k = options.keep_versions; k < versions.size(); ++k) {
    if (versions[k] == plan.new_active || versions[k] == plan.new_canary.version ||
        pinned.contains(versions[k])) {
      continue;
    }
    if (options.keep_versions_for_ms > 0) {
      VersionManifest old;
      uint32_t old_rpb = 0;
      PLUMB_RETURN_IF_ERROR(ReadManifestLocked(ro, versions[k], &old, &old_rpb));
      if (now_ms - old.created_ms < options.keep_versions_for_ms) continue;
    }
    PLUMB_RETURN_IF_ERROR(DeleteVersion(ro, versions[k], batch));
  }
  return Status::Ok();
}

void Store::Impl::PutActive(uint64_t version, rocksdb::WriteBatch* batch) const {
  batch->Put(meta, AsSlice(keys::kMetaActiveVersion), AsSlice(keys::Fixed64(version)));
}

Status Store::Commit(const StateChange& change, uint64_t* published) {
  if (published != nullptr) *published = 0;
  PLUMB_RETURN_IF_ERROR(impl_->RequirePrimary("Commit"));
  std::lock_guard write_lock(impl_->write_mu);
  Impl& d = *impl_;
  // This thread is the only writer: plain reads see the latest state.
  const rocksdb::ReadOptions ro;

  // Everything is checked before anything is written.
  Impl::CommitPlan plan;
  PLUMB_RETURN_IF_ERROR(d.ValidateChange(change, &plan));
  PLUMB_RETURN_IF_ERROR(d.NumberVersion(change, &plan));
  PLUMB_RETURN_IF_ERROR(d.ChooseActive(ro, change, &plan));
  PLUMB_RETURN_IF_ERROR(d.ChooseCanary(ro, change, &plan));

  // One batch.
  rocksdb::WriteBatch batch;
  d.PutState(change, &batch);
  if (change.version != nullptr) {
    d.PutVersion(plan, *change.version, &batch);
    PLUMB_RETURN_IF_ERROR(d.PruneVersions(ro, plan, &batch));
  }
  if (plan.new_active != plan.active) d.PutActive(plan.new_active, &batch);
  const Canary& was = plan.canary;
  const Canary& now = plan.new_canary;
  if (now.version != was.version || now.share_bp != was.share_bp) d.PutCanary(now, &batch);

  if (batch.Count() > 0) PLUMB_RETURN_IF_ERROR(d.Write(&batch, "committing state"));
  d.user_count.store(plan.users_after);
  d.item_count.store(plan.items_after);
  if (plan.version != 0) d.next_version = plan.version + 1;
  if (published != nullptr) *published = plan.version;
  return Status::Ok();
}

Status Store::SkipVersionNumbers(uint64_t next, uint64_t* was) {
  PLUMB_RETURN_IF_ERROR(impl_->RequirePrimary("SkipVersionNumbers"));
  std::lock_guard write_lock(impl_->write_mu);
  if (was != nullptr) *was = impl_->next_version;
  if (next <= impl_->next_version) return Status::Ok();
  rocksdb::WriteBatch batch;
  batch.Put(impl_->meta, AsSlice(keys::kMetaNextVersion), AsSlice(keys::Fixed64(next)));
  PLUMB_RETURN_IF_ERROR(
      impl_->Write(&batch, "moving the next version number to " + std::to_string(next)));
  impl_->next_version = next;
  return Status::Ok();
}

Status Store::Activate(uint64_t version) {
  PLUMB_RETURN_IF_ERROR(impl_->RequirePrimary("Activate"));
  std::lock_guard write_lock(impl_->write_mu);
  const rocksdb::ReadOptions ro;
  PLUMB_RETURN_IF_ERROR(impl_->CheckActivatable(ro, version));
  Canary canary;
  PLUMB_RETURN_IF_ERROR(impl_->ReadCanary(ro, &canary));
  rocksdb::WriteBatch batch;
  impl_->PutActive(version, &batch);
  // Activating the candidate promotes it: the canary ends in the same write.
  if (canary.version == version) impl_->PutCanary(Canary{}, &batch);
  return impl_->Write(&batch, "activating version " + std::to_string(version));
}

}  // namespace plumb::store
