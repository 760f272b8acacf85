// The training configuration recorded in every version's manifest (store::TrainingConfig):
// built from the options a trainer runs with, compared to recognise a changed configuration,
// and printed in one line for `plumb versions`, `plumb-query versions` and logs.
#pragma once

#include <cstdint>
#include <string>
#include <vector>

#include "store/store.h"
#include "trainer/trainer.h"
#include "trainer/tuner.h"

namespace plumb::online {

// What a fit with `options` at `dim` for `epochs` epochs records. replay_ratio is the online
// loop's (0 for an offline fit).
// tune_betas: the search space when beta is chosen by the tuner (empty: fixed beta).
store::TrainingConfig MakeTrainingConfig(std::string origin, const trainer::TrainOptions& options,
                                         uint32_t dim, uint32_t epochs, double replay_ratio,
                                         double holdout_fraction,
                                         std::vector<double> tune_betas = {});

// How `now` differs from what produced `before`, in the settings that decide what the
// embeddings learn (objective, dim, CPR k and k-mix, beta, optimiser, learning rate, l2,
// batch size, epochs, seed), e.g. "beta 3 -> 6, dim 32 -> 64"; empty when none differs. A
// version from before configurations were recorded is compared on its dim and objective only.
// When beta is tuned (on either side), the search spaces are compared instead of beta.
std::string DescribeConfigChange(const store::VersionManifest& before,
                                 const store::TrainingConfig& now);

// One line, e.g. "cpr k=2 beta=3 dim=32 adagrad lr=0.05 l2=0.0001 batch=1024 epochs=20
// seed=1"; "unrecorded" for an unknown configuration.
std::string FormatTrainingConfig(const store::TrainingConfig& config);

// The tuner's table as a version records it (VersionManifest::tune), row for row.
std::vector<store::TuneRecord> MakeTuneRecords(const std::vector<trainer::TuneRow>& rows);

}  // namespace plumb::online
