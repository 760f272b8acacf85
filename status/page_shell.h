// The frame both status pages share: the document head with the inline stylesheet (plain
// white, system fonts, nothing fetched), a header line and the footer.
#pragma once

#include <string>

namespace plumb::status {

// "<!DOCTYPE html>..." up to and including the opening of <main>. `title` is escaped.
// `refresh_seconds` > 0 adds a meta refresh (the page reloads itself; no script).
std::string PageStart(const std::string& title, const std::string& subtitle, int refresh_seconds);
// Closes <main> with a footer naming the JSON twin and the metrics.
std::string PageEnd(const std::string& json_path);

}  // namespace plumb::status
