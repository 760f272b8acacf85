// The hold-out share of a store: which share of (user, item) pairs a trainer holds out for
// validation (training_state.h's IsHeldOut). It is a property of the store, recorded in its
// meta values under kHoldoutFractionKey by every publish (the online loop's and `plumb fit`'s
// alike): replaying the log with another share would disagree with the interaction sets
// already written, so a trainer that finds one uses it instead of its configured share.
//
// The value is written as the shortest decimal text that reads back as exactly the same
// double, so that a share like 0.0123456789 gives the same split after a restart.
#pragma once

#include <optional>
#include <string>

#include "core/status.h"
#include "store/store.h"

namespace plumb::online {

inline constexpr char kHoldoutFractionKey[] = "holdout_fraction";

// The text stored for `fraction`: the shortest form that parses back to exactly `fraction`.
std::string HoldoutFractionText(double fraction);

// Parses a stored text. Corruption (quoting the text) unless it is a number in [0, 1) and
// nothing else.
Status ParseHoldoutFraction(const std::string& text, double* out);

// The share `store` holds, or nullopt when none was ever written. Corruption for a stored
// value ParseHoldoutFraction refuses; other errors as Store::GetMeta.
Status ReadHoldoutFraction(const store::Store& store, std::optional<double>* out);

}  // namespace plumb::online
