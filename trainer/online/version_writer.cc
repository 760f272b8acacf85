#include "trainer/online/version_writer.h"

#include "core/clock.h"
#include "trainer/online/holdout_meta.h"

namespace plumb::online {

Status CommitVersion(const VersionCommit& c, const trainer::Embeddings& model,
                     store::VersionManifest* manifest, uint64_t* version) {
  const trainer::Interactions& train = c.state->train();
  store::VersionManifest& m = *manifest;
  m.created_ms = NowMs();
  m.events_seen = c.cursor;
  m.num_interactions = train.size();
  m.num_users = model.num_users();
  m.num_items = model.num_items();
  m.dim = model.dim();

  store::VersionWrite write;
  write.manifest = m;
  write.users = {model.users().data(), model.num_users(), model.dim()};
  write.items = {model.items().data(), model.num_items(), model.dim()};
  write.item_degrees = train.item_degrees();
  store::StateChange change;
  c.state->CollectChanges(&change);
  change.cursor = c.cursor;
  change.version = &write;
  change.activate_published = c.activate;
  change.meta.emplace_back(kHoldoutFractionKey, HoldoutFractionText(c.holdout_fraction));
  uint64_t published = 0;
  PLUMB_RETURN_IF_ERROR(c.store->Commit(change, &published));
  c.state->MarkPersisted();
  m.version = published;
  if (version != nullptr) *version = published;
  return Status::Ok();
}

}  // namespace plumb::online
