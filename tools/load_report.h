// What plumb-load prints after a run: a short text report for people and the same figures
// as JSON for scripts (--json FILE).
#pragma once

#include <iosfwd>
#include <string>

#include "tools/event_publisher.h"
#include "tools/load_generator.h"

namespace plumb::tools {

struct LoadReport {
  std::string target;
  LoadOptions options;
  LoadResult result;
  bool published = false;  // the fields below are set only when true
  std::string ingest_target;
  PublishOptions publish_options;
  PublishResult publish;
};

// Writes the text report. Latencies in microseconds, labelled as such.
void PrintLoadReport(const LoadReport& report, std::ostream& out);

// The report as one JSON object (see the key names in load_report.cc; latencies in
// microseconds under keys ending in "_us").
std::string LoadReportJson(const LoadReport& report);

// `text` as a JSON string literal, quotes included.
std::string JsonString(const std::string& text);

}  // namespace plumb::tools
