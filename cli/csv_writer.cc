#include "cli/csv_writer.h"

#include <cstdio>
#include <fstream>

namespace plumb::cli {

std::string CsvField(std::string_view field) {
  if (field.find_first_of(",\"") == std::string_view::npos) return std::string(field);
  std::string out = "\"";
  for (char c : field) {
    if (c == '"') out += '"';
    out += c;
  }
  return out + "\"";
}

EventColumns ColumnsOf(std::span<const CsvEvent> rows) {
  EventColumns c;
  for (const CsvEvent& r : rows) {
    c.ts = c.ts || r.timestamp_ms > 0;
    c.weight = c.weight || r.weight != 1.0f;
    c.event_id = c.event_id || !r.event_id.empty();
  }
  return c;
}

Status WriteEventCsv(const std::string& path, std::span<const CsvEvent> rows,
                     std::span<const size_t> which, const EventColumns& columns) {
  std::ofstream f(path, std::ios::out | std::ios::trunc);
  if (!f) return Status::IoError("cannot open " + path + " for writing");
  f << "user,item";
  if (columns.ts) f << ",ts";
  if (columns.weight) f << ",weight";
  if (columns.event_id) f << ",event_id";
  f << '\n';
  char number[32];
  for (size_t r : which) {
    const CsvEvent& e = rows[r];
    f << CsvField(e.user) << ',' << CsvField(e.item);
    if (columns.ts) {
      f << ',';
      if (e.timestamp_ms > 0) f << e.timestamp_ms;
    }
    if (columns.weight) {
      // %.9g round-trips a float exactly (9 significant digits suffice for binary32).
      std::snprintf(number, sizeof number, "%.9g", static_cast<double>(e.weight));
      f << ',' << number;
    }
    if (columns.event_id) f << ',' << CsvField(e.event_id);
    f << '\n';
  }
  f.flush();
  if (!f) return Status::IoError("error writing " + path);
  return Status::Ok();
}

}  // namespace plumb::cli
