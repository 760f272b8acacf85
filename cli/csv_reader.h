// Reading the comma-separated files the `plumb` command line takes: interaction histories
// (`user,item[,ts][,weight][,event_id]`) and test sets (`user,item`).
#pragma once

#include <cstdint>
#include <fstream>
#include <functional>
#include <string>
#include <string_view>
#include <vector>

#include "core/status.h"

namespace plumb::cli {

// Splits one CSV line into fields. Fields may be double-quoted ("a,b" and "say ""hi""").
// InvalidArgument for an unterminated quote or text after a closing quote.
Status SplitCsvLine(std::string_view line, std::vector<std::string>* fields);

// The UTF-8 byte-order mark (EF BB BF) that spreadsheets write at the start of "CSV UTF-8"
// files. Every reader of a CSV header removes it (StripUtf8Bom) before splitting.
inline constexpr std::string_view kUtf8Bom = "\xEF\xBB\xBF";

// `text` without a leading UTF-8 byte-order mark (unchanged when it has none).
std::string_view StripUtf8Bom(std::string_view text);

// Splits the header line of `path` into column names, after removing a byte-order mark.
// InvalidArgument naming `path` for a malformed line.
Status SplitCsvHeader(const std::string& path, std::string_view line,
                      std::vector<std::string>* names);

// Opens the CSV file `path` and reads its header line into *header_line and, split as by
// SplitCsvHeader, *header; *in is left at the first data line. NotFound when the file cannot
// be opened, InvalidArgument naming `path` for an empty file or a malformed header.
Status OpenCsv(const std::string& path, std::ifstream* in, std::string* header_line,
               std::vector<std::string>* header);

// The error for a header that lacks a required column: names the file, the columns needed
// and the line found, and, when the line holds tabs or semicolons but no comma, says that
// plumb reads comma-separated files ("use commas").
Status MissingColumnsError(const std::string& path, std::string_view required,
                           std::string_view header_line);

struct CsvEvent {
  std::string user;
  std::string item;
  int64_t timestamp_ms = 0;  // 0 when the file has no ts column
  float weight = 1.0f;
  std::string event_id;
};

struct CsvReadOptions {
  // With true, malformed lines are counted and skipped; otherwise the first one stops the
  // read with an error naming the file, the line number and the reason.
  bool skip_bad = false;
};

struct CsvReadReport {
  uint64_t lines = 0;  // data lines (header excluded)
  uint64_t read = 0;
  uint64_t skipped = 0;
  std::string first_skip_reason;  // "file:line: reason" of the first skipped line
  // Likely mistakes that do not stop the read, one sentence each, e.g. every ts below
  // kPlausibleTimestampMs (seconds written where milliseconds belong). Callers show them.
  std::vector<std::string> warnings;
};

// 100,000,000,000 ms after the epoch is 1973-03-03T09:46:40Z. A file whose every timestamp
// lies below it almost certainly holds seconds (today is about 1.7e9 s, 1.7e12 ms): they
// would all be read as dates in early 1970.
inline constexpr int64_t kPlausibleTimestampMs = 100'000'000'000;

// Reads an event file (UTF-8, comma-separated; a leading byte-order mark is ignored). The
// header names the columns, in any order: `user` and `item` are
// required; `ts` (milliseconds since the epoch, integer), `weight` (in [0, 1000]; empty or 0
// means 1, the rule of InteractionEvent.weight on the wire) and `event_id` are optional;
// other columns are ignored. Ids are 1..256 bytes.
// On error `out` is left empty: nothing of a file with a bad line is kept.
Status ReadEventCsv(const std::string& path, const CsvReadOptions& options,
                    std::vector<CsvEvent>* out, CsvReadReport* report);

// ReadEventCsv for a command: how many malformed lines were skipped (with the first) and
// each warning are told on stderr as "<command>: ...".
Status ReadEventCsvTelling(const char* command, const std::string& path, bool skip_bad,
                           std::vector<CsvEvent>* out);

}  // namespace plumb::cli
