// Printing evaluation reports as aligned tables or JSON.
#pragma once

#include <string>
#include <utility>
#include <vector>

#include "core/metrics.h"

namespace plumb::cli {

// One column of a comparison: a label ("cpr", "truth") and its report.
using LabelledReport = std::pair<std::string, RankingReport>;

// A table with one row per figure and one column per report; group shares are printed as
// one row per group, the test set's shares in the last column.
std::string FormatReportTable(const std::vector<LabelledReport>& reports);

// {"k":..,"reports":{"cpr":{"recall":..,...}}, "test_group_shares":[...]}
std::string FormatReportJson(const std::vector<LabelledReport>& reports);

}  // namespace plumb::cli
