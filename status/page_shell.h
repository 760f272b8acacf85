// The frame both status pages share: the document head with the inline stylesheet (plain
// white, system fonts, nothing fetched), a header line and the footer.
#pragma once

#include <cstddef>
#include <cstdint>
#include <string>

namespace plumb::status {

// "<!DOCTYPE html>..." up to and including the opening of <main>. `title` is escaped.
// `refresh_seconds` > 0 adds a meta refresh (the page reloads itself; no script).
std::string PageStart(const std::string& title, const std::string& subtitle, int refresh_seconds);
// Appends a figure card: `label` over `value` (`digits` significant digits) and `unit`; the
// card carries data-key=`key` and the exact value (data-value). `label` and `unit` are
// plumb's own text (not escaped).
void AppendCard(std::string* page, const std::string& key, const std::string& label, double value,
                const std::string& unit, int digits = 3);
// The same with a text for the value (escaped) and no data-value.
void AppendTextCard(std::string* page, const std::string& key, const std::string& label,
                    const std::string& text);

// A spacing for people: "1 h", "5 min", "30 s" or "250 ms" (the largest whole unit).
std::string StepText(int64_t ms);

// The note above a page's history plots: the spacing of its points, how many are kept and
// drawn, and that the history lives in memory only.
std::string HistoryNote(int64_t step_ms, size_t history_points, size_t plot_points);

// Closes <main> with a footer naming the JSON twin and the metrics.
std::string PageEnd(const std::string& json_path);

}  // namespace plumb::status
