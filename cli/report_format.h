// Printing evaluation reports as aligned tables or JSON.
#pragma once

#include <string>
#include <utility>
#include <vector>

#include "core/metrics.h"
#include "trainer/tuner.h"

namespace plumb::cli {

// One column of a comparison: a label ("cpr", "truth") and its report.
using LabelledReport = std::pair<std::string, RankingReport>;

// A table with one row per figure and one column per report; group shares are printed as
// one row per group, the test set's shares in the last column.
std::string FormatReportTable(const std::vector<LabelledReport>& reports);

// {"k":..,"reports":{"cpr":{"recall":..,...}}, "test_group_shares":[...]}
// `extra` (optional) is appended as further members of the top-level object, e.g.
// "\"tune\":[...]".
std::string FormatReportJson(const std::vector<LabelledReport>& reports,
                             const std::string& extra = "");

// The tuner's table: one row per candidate (beta, k-mix share, debiased validation recall
// and NDCG at k, ARP, shift and distance of its group shares against the validation split's,
// the standard error against the best, near-tie and chosen marks), the validation split's own
// group shares, and the reason for the choice.
std::string FormatTuneTable(const trainer::TuneReport& report, uint32_t k);

}  // namespace plumb::cli
