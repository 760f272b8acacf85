#include "tools/event_replay.h"

#include <grpcpp/client_context.h>

#include <algorithm>
#include <chrono>
#include <cstdio>
#include <fstream>
#include <ostream>
#include <sstream>
#include <thread>

#include "cli/csv_reader.h"
#include "plumb/v1/ingest.grpc.pb.h"
#include "tools/client_channel.h"

namespace plumb::tools {
namespace {

using Clock = std::chrono::steady_clock;

// FNV-1a, 64 bits (Fowler, Noll, Vo): a content fingerprint, not a security measure.
uint64_t Fnv1a64(const std::string& bytes) {
  uint64_t h = 0xcbf29ce484222325ull;
  for (unsigned char c : bytes) {
    h ^= c;
    h *= 0x100000001b3ull;
  }
  return h;
}

// The file line of each data row ReadEventCsv returns: it skips the header and lines
// holding only spaces, tabs or a carriage return, and keeps every other line in order.
std::vector<uint64_t> DataLineNumbers(const std::string& text) {
  std::vector<uint64_t> lines;
  uint64_t line_no = 0;
  size_t pos = 0;
  while (pos < text.size()) {
    size_t eol = text.find('\n', pos);
    if (eol == std::string::npos) eol = text.size();
    ++line_no;
    const bool blank = std::all_of(text.begin() + static_cast<std::ptrdiff_t>(pos),
                                   text.begin() + static_cast<std::ptrdiff_t>(eol),
                                   [](char c) { return c == ' ' || c == '\t' || c == '\r'; });
    if (line_no > 1 && !blank) lines.push_back(line_no);
    pos = eol + 1;
  }
  return lines;
}

bool Transient(grpc::StatusCode code) {
  return code == grpc::StatusCode::UNAVAILABLE || code == grpc::StatusCode::RESOURCE_EXHAUSTED ||
         code == grpc::StatusCode::DEADLINE_EXCEEDED || code == grpc::StatusCode::ABORTED;
}

plumb::v1::InteractionEvent ToWire(const cli::CsvEvent& e, const std::string& id) {
  plumb::v1::InteractionEvent w;
  w.set_user_id(e.user);
  w.set_item_id(e.item);
  if (e.timestamp_ms > 0) w.set_timestamp_ms(e.timestamp_ms);
  if (e.weight != 1.0f) w.set_weight(e.weight);  // 1 goes as unset (0), which means 1
  w.set_event_id(id);
  return w;
}

}  // namespace

Status ReplayEvents(std::shared_ptr<grpc::Channel> channel, const ReplayOptions& options,
                    std::ostream* progress, ReplaySummary* summary) {
  *summary = ReplaySummary{};
  const std::string& path = options.events_file;
  if (options.batch == 0) return Status::InvalidArgument("--batch must be at least 1");
  if (!(options.events_per_second >= 0))
    return Status::InvalidArgument("--rate must not be negative");

  // ---- read and check everything before sending anything ------------------------------
  std::string text;
  {
    std::ifstream in(path, std::ios::binary);
    if (!in) return Status::NotFound("cannot open " + path);
    std::ostringstream buffer;
    buffer << in.rdbuf();
    text = buffer.str();
  }
  std::vector<cli::CsvEvent> events;
  cli::CsvReadReport report;
  PLUMB_RETURN_IF_ERROR(cli::ReadEventCsv(path, cli::CsvReadOptions{}, &events, &report));
  summary->warnings = report.warnings;
  std::vector<uint64_t> lines = DataLineNumbers(text);
  if (lines.size() != events.size()) {
    // The file changed between the two reads; ids from it would not be reproducible.
    return Status::Aborted(path + " changed while it was read; try again");
  }
  std::string prefix = options.id_prefix;
  if (prefix.empty()) {
    char hex[20];
    std::snprintf(hex, sizeof hex, "f%016llx", static_cast<unsigned long long>(Fnv1a64(text)));
    prefix = hex;
  }
  if (prefix.size() > 100) return Status::InvalidArgument("--id-prefix is longer than 100 bytes");
  text.clear();
  text.shrink_to_fit();
  summary->events = events.size();
  summary->id_prefix = prefix;

  // ---- send in file order --------------------------------------------------------------
  if (!channel->WaitForConnected(std::chrono::system_clock::now() +
                                 std::chrono::milliseconds(options.connect_timeout_ms))) {
    return Status::Unavailable("cannot reach the trainer within " +
                               std::to_string(options.connect_timeout_ms / 1000) + " s");
  }
  auto stub = plumb::v1::EventIngest::NewStub(channel);
  const Clock::time_point start = Clock::now();
  Clock::time_point last_progress = start;
  auto pace = [&](uint64_t sent) {
    if (options.events_per_second <= 0) return;
    std::this_thread::sleep_until(
        start + std::chrono::duration_cast<Clock::duration>(std::chrono::duration<double>(
                    static_cast<double>(sent) / options.events_per_second)));
  };
  auto event_id = [&](size_t i) {
    return events[i].event_id.empty() ? prefix + ":" + std::to_string(lines[i])
                                      : events[i].event_id;
  };

  for (size_t first = 0; first < events.size(); first += options.batch) {
    const size_t last = std::min(events.size(), first + options.batch);
    plumb::v1::PublishBatchRequest request;
    if (!options.stream) {
      for (size_t i = first; i < last; ++i) *request.add_events() = ToWire(events[i], event_id(i));
    }
    plumb::v1::PublishSummary answer;
    grpc::Status status;
    for (uint32_t attempt = 0;; ++attempt) {
      grpc::ClientContext context;
      context.set_deadline(std::chrono::system_clock::now() +
                           std::chrono::milliseconds(options.deadline_ms));
      context.set_wait_for_ready(true);  // a trainer restarting meanwhile is waited for
      AttachBearerToken(options.bearer_token, &context);
      answer.Clear();
      if (options.stream) {
        std::unique_ptr<grpc::ClientWriter<plumb::v1::InteractionEvent>> writer =
            stub->Publish(&context, &answer);
        for (size_t i = first; i < last; ++i) {
          if (!writer->Write(ToWire(events[i], event_id(i)))) break;  // Finish says why
          if ((i - first) % 64 == 63) pace(summary->sent + (i - first) + 1);
        }
        writer->WritesDone();
        status = writer->Finish();
      } else {
        status = stub->PublishBatch(&context, request, &answer);
      }
      ++summary->calls;
      if (status.ok() || !Transient(status.error_code()) || attempt >= options.retries) break;
      ++summary->retried;
      if (progress != nullptr) {
        *progress << "replay: " << DescribeStatus(status) << " at " << path << ":" << lines[first]
                  << "; sending the same events again\n";
      }
      std::this_thread::sleep_for(
          std::chrono::milliseconds(std::min(2000, 100 << std::min(attempt, 5u))));
    }
    if (!status.ok()) {
      summary->seconds = std::chrono::duration<double>(Clock::now() - start).count();
      const std::string where = "replay stopped at " + path + ":" + std::to_string(lines[first]) +
                                " (" + std::to_string(summary->sent) +
                                " events before it are acknowledged; replaying the file again "
                                "is safe)";
      if (Transient(status.error_code())) {
        return Status::Unavailable(DescribeStatus(status) + "; " + where);
      }
      return Status::FailedPrecondition(DescribeStatus(status) + "; " + where);
    }
    summary->sent += last - first;
    summary->accepted += answer.accepted();
    summary->duplicates += answer.duplicates();
    summary->rejected += answer.rejected();
    summary->last_sequence = std::max(summary->last_sequence, answer.last_sequence());
    for (const plumb::v1::Rejection& r : answer.rejections()) {
      if (summary->rejections.size() >= 20) break;
      const size_t i = first + static_cast<size_t>(r.index());
      const std::string where = i < last ? path + ":" + std::to_string(lines[i]) : path;
      summary->rejections.push_back(where + ": " + plumb::v1::RejectReason_Name(r.reason()) +
                                    (r.detail().empty() ? "" : ": " + r.detail()));
    }
    pace(summary->sent);
    const Clock::time_point now = Clock::now();
    if (progress != nullptr &&
        (now - last_progress >= std::chrono::seconds(1) || last == events.size())) {
      last_progress = now;
      const double elapsed = std::chrono::duration<double>(now - start).count();
      char line[256];
      std::snprintf(line, sizeof line,
                    "replay: %llu/%llu events (%.1f%%), %llu accepted, %llu duplicates, %llu "
                    "rejected, %.0f events/s\n",
                    static_cast<unsigned long long>(summary->sent),
                    static_cast<unsigned long long>(summary->events),
                    100.0 * static_cast<double>(summary->sent) /
                        static_cast<double>(std::max<uint64_t>(1, summary->events)),
                    static_cast<unsigned long long>(summary->accepted),
                    static_cast<unsigned long long>(summary->duplicates),
                    static_cast<unsigned long long>(summary->rejected),
                    elapsed > 0 ? static_cast<double>(summary->sent) / elapsed : 0.0);
      *progress << line << std::flush;
    }
  }
  summary->seconds = std::chrono::duration<double>(Clock::now() - start).count();
  return Status::Ok();
}

}  // namespace plumb::tools
