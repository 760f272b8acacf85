// CSV import (`plumb import`, `plumb fit --events`): any file content must give events that
// respect the documented limits, or a clear error, never a crash. Checks what a read
// promises: ids of 1..256 bytes, weights in (0, 1000], and with skip_bad the line counts add
// up.
#include <sys/mman.h>
#include <unistd.h>

#include <cstdint>
#include <cstdlib>
#include <string>
#include <vector>

#include "cli/csv_reader.h"

namespace {

// The input goes to an in-memory file, named through /proc, because the reader takes a path.
int MemoryFile() {
  static const int fd = memfd_create("plumb-fuzz-csv", 0);
  return fd;
}

void Require(bool ok) {
  if (!ok) std::abort();
}

}  // namespace

extern "C" int LLVMFuzzerTestOneInput(const uint8_t* data, size_t size) {
  const int fd = MemoryFile();
  if (fd < 0) std::abort();
  if (ftruncate(fd, 0) != 0 || pwrite(fd, data, size, 0) != static_cast<ssize_t>(size)) {
    std::abort();
  }
  const std::string path = "/proc/self/fd/" + std::to_string(fd);
  for (bool skip_bad : {false, true}) {
    plumb::cli::CsvReadOptions options;
    options.skip_bad = skip_bad;
    std::vector<plumb::cli::CsvEvent> events;
    plumb::cli::CsvReadReport report;
    plumb::Status s = plumb::cli::ReadEventCsv(path, options, &events, &report);
    if (!s.ok()) {
      Require(events.empty());  // nothing of a file with a bad line is kept
      continue;
    }
    Require(report.read == events.size());
    if (skip_bad) Require(report.read + report.skipped == report.lines);
    for (const auto& e : events) {
      Require(!e.user.empty() && e.user.size() <= 256);
      Require(!e.item.empty() && e.item.size() <= 256);
      Require(e.weight > 0.0f && e.weight <= 1000.0f);
    }
  }
  // The field splitter on its own, line by line.
  std::string_view text(reinterpret_cast<const char*>(data), size);
  std::vector<std::string> fields;
  while (!text.empty()) {
    const size_t end = text.find('\n');
    // Arbitrary bytes: an error is a valid answer here; the target checks only that the
    // splitter neither crashes nor reads out of bounds.
    plumb::cli::SplitCsvLine(text.substr(0, end), &fields).IgnoreError();
    if (end == std::string_view::npos) break;
    text.remove_prefix(end + 1);
  }
  return 0;
}
