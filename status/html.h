// HTML text for the status pages: escaping of anything that did not come from plumb's own
// source (ids are user data), and number formatting shared by the pages' tables and plots.
//
// All functions are pure and thread-safe.
#pragma once

#include <cstddef>
#include <string>
#include <string_view>

namespace plumb::status {

// Appends `text` to `out` so that it reads as the same characters in HTML text and in a
// quoted attribute value, and can never open a tag, an attribute or an entity:
//   & < > " '                       become &amp; &lt; &gt; &quot; &#39;
//   control characters (C0, DEL, C1) and bytes that are not UTF-8
//                                   become U+FFFD (shown as the replacement character)
// When max_chars > 0, at most that many characters (code points) are kept and "…" marks a
// cut (a long id stays one line on the page).
void AppendEscaped(std::string* out, std::string_view text, size_t max_chars = 0);

// The same, returned.
std::string Escaped(std::string_view text, size_t max_chars = 0);

// A number for a page: NaN and infinities as "–" (not measured), otherwise `digits`
// significant digits without exponent for ordinary magnitudes ("0.0123", "1234", "12.5").
std::string FormatNumber(double value, int digits = 3);

// A number for a machine: shortest text that reads back as the same double ("%.17g"
// trimmed), "NaN" for NaN. Used in data-value attributes so that a test can compare the page
// with /status.json exactly.
std::string ExactNumber(double value);

// Milliseconds since the Unix epoch as "2026-12-02 21:53:53 UTC" ("–" for <= 0).
std::string FormatUtc(int64_t ms);
// ... as "21:53" (axis ticks).
std::string FormatUtcMinute(int64_t ms);

}  // namespace plumb::status
