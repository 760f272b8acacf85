// plumb split: an event file divided into train.csv, test.csv and (optionally)
// validation.csv, by pair, at random, by time per user, or debiased by inverse popularity
// (cli/event_split.h).
#include <cstdio>
#include <filesystem>

#include "cli/commands.h"
#include "cli/csv_reader.h"
#include "cli/csv_writer.h"
#include "cli/event_split.h"

namespace plumb::cli {

Status RunSplit(const SplitArgs& args) {
  namespace fs = std::filesystem;
  EventSplitOptions options;
  PLUMB_RETURN_IF_ERROR(ParseSplitKind(args.kind, &options.kind));
  options.holdout_fraction = args.holdout_fraction;
  options.validation_fraction = args.validation_fraction;
  options.seed = args.seed;

  std::vector<CsvEvent> rows;
  CsvReadReport report;
  CsvReadOptions read;
  read.skip_bad = args.skip_bad;
  PLUMB_RETURN_IF_ERROR(ReadEventCsv(args.events, read, &rows, &report));
  if (report.skipped > 0) {
    std::fprintf(stderr, "split: skipped %llu malformed lines (first: %s)\n",
                 static_cast<unsigned long long>(report.skipped), report.first_skip_reason.c_str());
  }
  for (const std::string& w : report.warnings)
    std::fprintf(stderr, "split: warning: %s\n", w.c_str());

  EventSplit split;
  PLUMB_RETURN_IF_ERROR(SplitEvents(rows, options, &split));

  const fs::path dir(args.out);
  const fs::path train = dir / "train.csv", validation = dir / "validation.csv",
                 test = dir / "test.csv";
  std::error_code ec;
  fs::create_directories(dir, ec);
  if (ec) return Status::IoError("cannot create directory " + args.out + ": " + ec.message());
  // Never write over the file being split.
  for (const fs::path& p : {train, validation, test}) {
    if (fs::exists(p, ec) && fs::equivalent(p, args.events, ec)) {
      return Status::InvalidArgument("--out would overwrite the input " + args.events + " (as " +
                                     p.string() + "); choose another directory");
    }
  }
  const EventColumns columns = ColumnsOf(rows);
  // Validation and test files list pairs: user, item and (when the input has one) the
  // pair's first event's ts.
  EventColumns pair_columns;
  pair_columns.ts = columns.ts;
  PLUMB_RETURN_IF_ERROR(WriteEventCsv(train.string(), rows, split.train_rows, columns));
  PLUMB_RETURN_IF_ERROR(WriteEventCsv(test.string(), rows, split.test_rows, pair_columns));
  if (args.validation_fraction > 0.0) {
    PLUMB_RETURN_IF_ERROR(
        WriteEventCsv(validation.string(), rows, split.validation_rows, pair_columns));
  } else if (fs::exists(validation, ec)) {
    // A validation.csv of an earlier split would not belong with these files.
    fs::remove(validation, ec);
  }

  std::printf("%s split of %zu events, %zu distinct (user, item) pairs, seed %llu:\n",
              args.kind.c_str(), rows.size(), split.pairs,
              static_cast<unsigned long long>(args.seed));
  if (options.kind == SplitKind::kDebiased) {
    std::printf(
        "  %zu pairs held out at random, %zu kept with probability proportional to "
        "1 / popularity, %zu returned to training\n",
        split.held_out, split.kept, split.held_out - split.kept);
  }
  std::printf("  %s: %zu events (%zu pairs)\n", train.c_str(), split.train_rows.size(),
              split.pairs - split.kept);
  if (args.validation_fraction > 0.0) {
    std::printf("  %s: %zu pairs\n", validation.c_str(), split.validation_rows.size());
  }
  std::printf("  %s: %zu pairs\n", test.c_str(), split.test_rows.size());
  if (split.kept == 0) {
    std::fprintf(stderr,
                 "split: warning: nothing was held out (%zu pairs; raise "
                 "--holdout-fraction)\n",
                 split.pairs);
  }
  if (split.cold_user_pairs + split.cold_item_pairs > 0) {
    std::fprintf(stderr,
                 "split: note: %zu held-out pairs name a user and %zu an item that has no "
                 "training pair; a model fitted on %s cannot score them (plumb eval leaves them "
                 "out and says how many)\n",
                 split.cold_user_pairs, split.cold_item_pairs, train.c_str());
  }
  return Status::Ok();
}

}  // namespace plumb::cli
