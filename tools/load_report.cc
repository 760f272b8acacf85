#include "tools/load_report.h"

#include <cmath>
#include <cstdio>
#include <ostream>
#include <sstream>

namespace plumb::tools {
namespace {

double Us(int64_t ns) { return static_cast<double>(ns) / 1000.0; }
double Us(double ns) { return ns / 1000.0; }

std::string Fixed(double value, int decimals) {
  char text[64];
  std::snprintf(text, sizeof text, "%.*f", decimals, std::isfinite(value) ? value : 0.0);
  return text;
}

std::string LatencyLine(const LatencySummary& l) {
  std::ostringstream out;
  out << "min " << Fixed(Us(l.min_ns), 1) << "  mean " << Fixed(Us(l.mean_ns), 1) << "  p50 "
      << Fixed(Us(l.p50_ns), 1) << "  p90 " << Fixed(Us(l.p90_ns), 1) << "  p99 "
      << Fixed(Us(l.p99_ns), 1) << "  p99.9 " << Fixed(Us(l.p999_ns), 1) << "  max "
      << Fixed(Us(l.max_ns), 1);
  if (l.kept < l.count) out << "  (percentiles from a sample of " << l.kept << ")";
  return out.str();
}

void ErrorLines(const CallTally& t, const char* indent, std::ostream& out) {
  for (const auto& [code, n] : t.errors_by_code) {
    out << indent << code << ": " << n;
    const auto first = t.first_error.find(code);
    if (first != t.first_error.end() && !first->second.empty()) {
      out << " (first: " << first->second << ")";
    }
    out << "\n";
  }
}

std::string LatencyJson(const LatencySummary& l) {
  std::ostringstream out;
  out << "{\"count\": " << l.count << ", \"samples\": " << l.kept
      << ", \"min_us\": " << Fixed(Us(l.min_ns), 3) << ", \"mean_us\": " << Fixed(Us(l.mean_ns), 3)
      << ", \"p50_us\": " << Fixed(Us(l.p50_ns), 3) << ", \"p90_us\": " << Fixed(Us(l.p90_ns), 3)
      << ", \"p99_us\": " << Fixed(Us(l.p99_ns), 3) << ", \"p999_us\": " << Fixed(Us(l.p999_ns), 3)
      << ", \"max_us\": " << Fixed(Us(l.max_ns), 3) << "}";
  return out.str();
}

std::string ErrorsJson(const CallTally& t) {
  std::ostringstream out;
  out << "{";
  bool first = true;
  for (const auto& [code, n] : t.errors_by_code) {
    out << (first ? "" : ", ") << JsonString(code) << ": " << n;
    first = false;
  }
  out << "}";
  return out.str();
}

std::string FirstErrorsJson(const CallTally& t) {
  std::ostringstream out;
  out << "{";
  bool first = true;
  for (const auto& [code, message] : t.first_error) {
    out << (first ? "" : ", ") << JsonString(code) << ": " << JsonString(message);
    first = false;
  }
  out << "}";
  return out.str();
}

}  // namespace

std::string JsonString(const std::string& text) {
  std::string out = "\"";
  for (unsigned char c : text) {
    switch (c) {
      case '"':
        out += "\\\"";
        break;
      case '\\':
        out += "\\\\";
        break;
      case '\n':
        out += "\\n";
        break;
      case '\r':
        out += "\\r";
        break;
      case '\t':
        out += "\\t";
        break;
      default:
        if (c < 0x20) {
          char esc[8];
          std::snprintf(esc, sizeof esc, "\\u%04x", c);
          out += esc;
        } else {
          out += static_cast<char>(c);  // UTF-8 passes through unchanged
        }
    }
  }
  return out + "\"";
}

void PrintLoadReport(const LoadReport& report, std::ostream& out) {
  const LoadOptions& o = report.options;
  const LoadResult& r = report.result;
  out << "plumb-load: " << LoadRpcName(o.rpc) << " against " << report.target << ", ";
  if (o.rate > 0) {
    out << "open loop at " << Fixed(o.rate, 0) << " calls/s";
  } else {
    out << "closed loop with " << o.concurrency << " calls in flight";
  }
  out << ", " << o.threads << (o.threads == 1 ? " thread" : " threads") << "; "
      << Fixed(o.duration_seconds, 1) << " s measured after " << Fixed(o.warmup_seconds, 1)
      << " s warm-up\n";
  out << "  requests:  " << (r.calls.ok + r.calls.failed) << " in the window ("
      << Fixed(r.calls_per_second(), 1) << " requests/s), " << r.calls.ok << " OK, "
      << r.calls.failed << " errors\n";
  if (o.rate > 0 && r.delayed > 0) {
    out << "  delayed:   " << r.delayed << " calls waited because " << o.max_outstanding
        << " were in flight (latency counts from their scheduled start)\n";
  }
  out << "  latency of OK calls, microseconds: " << LatencyLine(r.calls.latency) << "\n";
  if (o.rate > 0) {
    out << "  start lag (call start after its slot, included above), microseconds: p50 "
        << Fixed(Us(r.start_lag.p50_ns), 1) << "  p99 " << Fixed(Us(r.start_lag.p99_ns), 1)
        << "  max " << Fixed(Us(r.start_lag.max_ns), 1) << "\n";
  }
  if (r.calls.failed > 0) {
    out << "  errors by status:\n";
    ErrorLines(r.calls, "    ", out);
  }
  if (report.published) {
    const PublishResult& p = report.publish;
    const PublishOptions& po = report.publish_options;
    out << "  publish:   " << Fixed(po.events_per_second, 0) << " events/s asked, batches of "
        << po.batch << " to " << report.ingest_target << ": " << p.acknowledged
        << " events acknowledged (" << Fixed(p.seconds > 0 ? p.acknowledged / p.seconds : 0, 1)
        << " events/s; " << p.accepted << " accepted, " << p.duplicates << " duplicates), "
        << p.rejected << " rejected, " << p.calls.failed << " failed calls of " << p.batches
        << "\n";
    out << "  batch latency of OK calls, microseconds: " << LatencyLine(p.calls.latency) << "\n";
    if (p.calls.failed > 0) {
      out << "  publish errors by status:\n";
      ErrorLines(p.calls, "    ", out);
    }
  }
}

std::string LoadReportJson(const LoadReport& report) {
  const LoadOptions& o = report.options;
  const LoadResult& r = report.result;
  std::ostringstream out;
  out << "{\n"
      << "  \"rpc\": " << JsonString(LoadRpcName(o.rpc)) << ",\n"
      << "  \"target\": " << JsonString(report.target) << ",\n"
      << "  \"mode\": " << JsonString(o.rate > 0 ? "open" : "closed") << ",\n"
      << "  \"rate\": " << Fixed(o.rate, 3) << ",\n"
      << "  \"concurrency\": " << (o.rate > 0 ? 0 : o.concurrency) << ",\n"
      << "  \"threads\": " << o.threads << ",\n"
      << "  \"warmup_seconds\": " << Fixed(o.warmup_seconds, 3) << ",\n"
      << "  \"duration_seconds\": " << Fixed(r.seconds, 3) << ",\n"
      << "  \"count\": " << o.count << ",\n"
      << "  \"exclude_seen\": " << (o.exclude_seen ? "true" : "false") << ",\n"
      << "  \"zipf_s\": " << Fixed(o.zipf_s, 3) << ",\n"
      << "  \"requests\": " << (r.calls.ok + r.calls.failed) << ",\n"
      << "  \"ok\": " << r.calls.ok << ",\n"
      << "  \"errors\": " << r.calls.failed << ",\n"
      << "  \"requests_per_second\": " << Fixed(r.calls_per_second(), 3) << ",\n"
      << "  \"started\": " << r.started << ",\n"
      << "  \"delayed\": " << r.delayed << ",\n"
      << "  \"errors_by_code\": " << ErrorsJson(r.calls) << ",\n"
      << "  \"first_error\": " << FirstErrorsJson(r.calls) << ",\n"
      << "  \"latency_us\": " << LatencyJson(r.calls.latency) << ",\n"
      << "  \"start_lag_us\": " << LatencyJson(r.start_lag);
  if (report.published) {
    const PublishResult& p = report.publish;
    const PublishOptions& po = report.publish_options;
    out << ",\n  \"publish\": {\n"
        << "    \"target\": " << JsonString(report.ingest_target) << ",\n"
        << "    \"events_per_second_asked\": " << Fixed(po.events_per_second, 3) << ",\n"
        << "    \"batch\": " << po.batch << ",\n"
        << "    \"seconds\": " << Fixed(p.seconds, 3) << ",\n"
        << "    \"batches\": " << p.batches << ",\n"
        << "    \"events_sent\": " << p.events_sent << ",\n"
        << "    \"acknowledged\": " << p.acknowledged << ",\n"
        << "    \"acknowledged_per_second\": "
        << Fixed(p.seconds > 0 ? p.acknowledged / p.seconds : 0, 3) << ",\n"
        << "    \"accepted\": " << p.accepted << ",\n"
        << "    \"duplicates\": " << p.duplicates << ",\n"
        << "    \"rejected\": " << p.rejected << ",\n"
        << "    \"errors\": " << p.calls.failed << ",\n"
        << "    \"delayed\": " << p.delayed << ",\n"
        << "    \"errors_by_code\": " << ErrorsJson(p.calls) << ",\n"
        << "    \"first_error\": " << FirstErrorsJson(p.calls) << ",\n"
        << "    \"batch_latency_us\": " << LatencyJson(p.calls.latency) << ",\n"
        << "    \"start_lag_us\": " << LatencyJson(p.start_lag) << "\n  }";
  }
  out << "\n}\n";
  return out.str();
}

}  // namespace plumb::tools
