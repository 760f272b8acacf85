#include "cli/csv_reader.h"

#include <charconv>
#include <cmath>
#include <cstdio>
#include <fstream>
#include <optional>

namespace plumb::cli {
namespace {

constexpr size_t kMaxIdBytes = 256;

std::string_view Trim(std::string_view s) {
  while (!s.empty() && (s.back() == '\r' || s.back() == ' ' || s.back() == '\t'))
    s.remove_suffix(1);
  while (!s.empty() && (s.front() == ' ' || s.front() == '\t')) s.remove_prefix(1);
  return s;
}

Status CheckId(std::string_view name, const std::string& value) {
  if (value.empty()) return Status::InvalidArgument(std::string(name) + " is empty");
  if (value.size() > kMaxIdBytes) {
    return Status::InvalidArgument(std::string(name) + " is " + std::to_string(value.size()) +
                                   " bytes, the limit is " + std::to_string(kMaxIdBytes));
  }
  return Status::Ok();
}

}  // namespace

Status SplitCsvLine(std::string_view line, std::vector<std::string>* fields) {
  fields->clear();
  std::string current;
  size_t i = 0;
  bool field_start = true;
  while (true) {
    if (field_start && i < line.size() && line[i] == '"') {
      ++i;
      bool closed = false;
      while (i < line.size()) {
        if (line[i] == '"') {
          if (i + 1 < line.size() && line[i + 1] == '"') {
            current.push_back('"');
            i += 2;
            continue;
          }
          closed = true;
          ++i;
          break;
        }
        current.push_back(line[i++]);
      }
      if (!closed) return Status::InvalidArgument("unterminated quoted field");
      if (i < line.size() && line[i] != ',' && line[i] != '\r') {
        return Status::InvalidArgument("text after a closing quote");
      }
    }
    field_start = false;
    if (i >= line.size() || line[i] == ',') {
      fields->push_back(std::string(Trim(current)));
      current.clear();
      if (i >= line.size()) break;
      ++i;
      field_start = true;
      continue;
    }
    current.push_back(line[i++]);
  }
  return Status::Ok();
}

std::string_view StripUtf8Bom(std::string_view text) {
  if (text.starts_with(kUtf8Bom)) text.remove_prefix(kUtf8Bom.size());
  return text;
}

Status SplitCsvHeader(const std::string& path, std::string_view line,
                      std::vector<std::string>* names) {
  if (Status s = SplitCsvLine(StripUtf8Bom(line), names); !s.ok()) {
    return Status::InvalidArgument(path + ":1: " + s.message());
  }
  return Status::Ok();
}

Status OpenCsv(const std::string& path, std::ifstream* in, std::string* header_line,
               std::vector<std::string>* header) {
  in->open(path);
  if (!*in) return Status::NotFound("cannot open " + path);
  if (!std::getline(*in, *header_line)) {
    return Status::InvalidArgument(path + ": empty file, expected a header line");
  }
  return SplitCsvHeader(path, *header_line, header);
}

Status MissingColumnsError(const std::string& path, std::string_view required,
                           std::string_view header_line) {
  std::string_view shown = StripUtf8Bom(header_line);
  while (!shown.empty() && (shown.back() == '\r' || shown.back() == '\n')) shown.remove_suffix(1);
  std::string message = path + ":1: header must name columns " + std::string(required) + " (got '" +
                        std::string(shown) + "')";
  if (shown.find(',') == std::string_view::npos) {
    if (shown.find('\t') != std::string_view::npos) {
      message +=
          "; the columns are separated by tabs: plumb reads comma-separated files, "
          "use commas";
    } else if (shown.find(';') != std::string_view::npos) {
      message +=
          "; the columns are separated by semicolons: plumb reads comma-separated "
          "files, use commas";
    }
  }
  return Status::InvalidArgument(message);
}

Status ReadEventCsv(const std::string& path, const CsvReadOptions& options,
                    std::vector<CsvEvent>* out, CsvReadReport* report) {
  out->clear();
  *report = CsvReadReport{};
  std::ifstream in;
  std::string line;
  std::vector<std::string> fields;
  PLUMB_RETURN_IF_ERROR(OpenCsv(path, &in, &line, &fields));
  std::optional<size_t> col_user, col_item, col_ts, col_weight, col_event;
  for (size_t c = 0; c < fields.size(); ++c) {
    const std::string& name = fields[c];
    if (name == "user")
      col_user = c;
    else if (name == "item")
      col_item = c;
    else if (name == "ts")
      col_ts = c;
    else if (name == "weight")
      col_weight = c;
    else if (name == "event_id")
      col_event = c;
  }
  if (!col_user || !col_item) {
    return MissingColumnsError(path, "'user' and 'item'", line);
  }

  uint64_t line_no = 1;
  uint64_t timestamps = 0;
  int64_t max_ts = 0;
  auto fail_or_skip = [&](const std::string& reason) -> Status {
    std::string where = path + ":" + std::to_string(line_no) + ": " + reason;
    if (!options.skip_bad) {
      out->clear();
      return Status::InvalidArgument(where);
    }
    if (report->skipped == 0) report->first_skip_reason = where;
    ++report->skipped;
    return Status::Ok();
  };

  while (std::getline(in, line)) {
    ++line_no;
    if (Trim(line).empty()) continue;
    ++report->lines;
    if (Status s = SplitCsvLine(line, &fields); !s.ok()) {
      PLUMB_RETURN_IF_ERROR(fail_or_skip(s.message()));
      continue;
    }
    auto field = [&](std::optional<size_t> col) -> const std::string* {
      if (!col || *col >= fields.size()) return nullptr;
      return &fields[*col];
    };
    const std::string* user = field(col_user);
    const std::string* item = field(col_item);
    if (!user || !item) {
      PLUMB_RETURN_IF_ERROR(fail_or_skip("expected at least " +
                                         std::to_string(std::max(*col_user, *col_item) + 1) +
                                         " fields, found " + std::to_string(fields.size())));
      continue;
    }
    CsvEvent ev;
    ev.user = *user;
    ev.item = *item;
    if (Status s = CheckId("user", ev.user); !s.ok()) {
      PLUMB_RETURN_IF_ERROR(fail_or_skip(s.message()));
      continue;
    }
    if (Status s = CheckId("item", ev.item); !s.ok()) {
      PLUMB_RETURN_IF_ERROR(fail_or_skip(s.message()));
      continue;
    }
    if (const std::string* ts = field(col_ts); ts && !ts->empty()) {
      auto [p, ec] = std::from_chars(ts->data(), ts->data() + ts->size(), ev.timestamp_ms);
      if (ec != std::errc() || p != ts->data() + ts->size() || ev.timestamp_ms < 0) {
        PLUMB_RETURN_IF_ERROR(
            fail_or_skip("ts '" + *ts + "' is not a non-negative integer (milliseconds)"));
        continue;
      }
    }
    if (const std::string* w = field(col_weight); w && !w->empty()) {
      float weight = 0;
      auto [p, ec] = std::from_chars(w->data(), w->data() + w->size(), weight);
      if (ec != std::errc() || p != w->data() + w->size() || !std::isfinite(weight) ||
          weight < 0.0f || weight > 1000.0f) {
        PLUMB_RETURN_IF_ERROR(
            fail_or_skip("weight '" + *w + "' is not a number in [0, 1000] (0 means 1)"));
        continue;
      }
      // One rule with the wire, where an unset weight reads as 0: 0 means the default 1.
      ev.weight = weight == 0.0f ? 1.0f : weight;
    }
    if (const std::string* e = field(col_event); e) {
      if (e->size() > 128) {
        PLUMB_RETURN_IF_ERROR(fail_or_skip("event_id is longer than 128 bytes"));
        continue;
      }
      ev.event_id = *e;
    }
    if (ev.timestamp_ms > 0) {
      ++timestamps;
      max_ts = std::max(max_ts, ev.timestamp_ms);
    }
    out->push_back(std::move(ev));
    ++report->read;
  }
  if (timestamps > 0 && max_ts < kPlausibleTimestampMs) {
    report->warnings.push_back(
        path + ": every ts is below " + std::to_string(kPlausibleTimestampMs) +
        " (1973-03-03 in milliseconds; the largest is " + std::to_string(max_ts) +
        "): are they seconds? ts is read as milliseconds since the epoch, so these events "
        "are dated 1970; multiply by 1000");
  }
  if (in.bad()) return Status::IoError(path + ": read error after line " + std::to_string(line_no));
  return Status::Ok();
}

Status ReadEventCsvTelling(const char* command, const std::string& path, bool skip_bad,
                           std::vector<CsvEvent>* out) {
  CsvReadReport report;
  CsvReadOptions opt;
  opt.skip_bad = skip_bad;
  PLUMB_RETURN_IF_ERROR(ReadEventCsv(path, opt, out, &report));
  if (report.skipped > 0) {
    std::fprintf(stderr, "%s: skipped %llu malformed lines (first: %s)\n", command,
                 static_cast<unsigned long long>(report.skipped), report.first_skip_reason.c_str());
  }
  for (const std::string& w : report.warnings) {
    std::fprintf(stderr, "%s: warning: %s\n", command, w.c_str());
  }
  return Status::Ok();
}

}  // namespace plumb::cli
