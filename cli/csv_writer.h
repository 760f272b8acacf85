// Writing the comma-separated files the `plumb` command line reads (cli/csv_reader.h), so that
// what one command writes the others read back unchanged.
#pragma once

#include <cstddef>
#include <span>
#include <string>
#include <string_view>

#include "cli/csv_reader.h"
#include "core/status.h"

namespace plumb::cli {

// `field` as one CSV field: unchanged, or double-quoted with inner quotes doubled when it
// holds a comma or a quote (RFC 4180, section 2, rules 6 and 7). SplitCsvLine reads it back
// as `field`.
std::string CsvField(std::string_view field);

// Which optional columns an event file carries besides user and item.
struct EventColumns {
  bool ts = false;
  bool weight = false;
  bool event_id = false;
};

// The optional columns `rows` need: ts when any row has one, weight when any weight is not
// 1, event_id when any row has one.
EventColumns ColumnsOf(std::span<const CsvEvent> rows);

// Writes the header `user,item[,ts][,weight][,event_id]` and then rows[r] for every r in
// `which` (indexes into rows, written in the given order), creating or truncating `path`.
// A row without a ts or event_id gets an empty field. IoError naming the path when the file
// cannot be written. ReadEventCsv reads the file back to the same rows.
Status WriteEventCsv(const std::string& path, std::span<const CsvEvent> rows,
                     std::span<const size_t> which, const EventColumns& columns);

}  // namespace plumb::cli
