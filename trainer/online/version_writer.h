// CommitVersion: how a trainer publishes, written once for the online loop's publishes and
// `plumb fit` / `plumb tune`. A version is the model together with the training state it was
// trained on: one atomic store write holds the embeddings, the manifest, the item degrees,
// the state's new dictionary entries and interactions, the log cursor the state has consumed
// and the store's hold-out share (holdout_meta.h). A crash leaves either all of it or none.
#pragma once

#include <cstdint>

#include "core/status.h"
#include "store/store.h"
#include "trainer/embeddings.h"
#include "trainer/online/training_state.h"

namespace plumb::online {

struct VersionCommit {
  store::Store* store = nullptr;  // a primary
  TrainingState* state = nullptr;
  uint64_t cursor = 0;  // the last log sequence folded into *state
  double holdout_fraction = 0.0;
  bool activate = false;  // make the new version active in the same write
};

// Publishes `model` (trained on *c.state, sized to its dictionaries). *manifest comes with the
// fields that only the caller knows (objective, gate, figures, training configuration,
// validation figures, tuner table) and receives the rest: created_ms (now), events_seen
// (c.cursor), num_interactions, num_users, num_items and dim. On success *version (optional)
// receives the new version's number and the state's changes are marked persisted. On error
// nothing was written and the state still holds its changes. Not thread-safe: the caller
// owns the state.
Status CommitVersion(const VersionCommit& c, const trainer::Embeddings& model,
                     store::VersionManifest* manifest, uint64_t* version);

}  // namespace plumb::online
