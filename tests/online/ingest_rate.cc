// ingest_rate: durable ingest over one client stream on loopback, for the README's figure.
// An in-process EventIngest server over a real store (fsync on every log write) in a
// temporary directory; one client streams events with event_ids through Publish. Prints
// events per second for each commit window given. A measurement, not a test: it asserts
// nothing beyond "every event was acknowledged".
//
//   ingest_rate [--events N] [--chunk N] [--windows 0,10] [--max-group N] [--no-sync]
//               [--memory] [--dir DIR]
// --max-group 1000 with --chunk 1000 gives every chunk its own fsync (no group commit).
// --memory swaps the store for an in-memory log, to separate the transport's cost.
#include <grpcpp/grpcpp.h>
#include <sys/resource.h>

#include <chrono>
#include <cstdio>
#include <cstdlib>
#include <cstring>
#include <filesystem>
#include <memory>
#include <sstream>
#include <string>
#include <vector>

#include "store/store.h"
#include "tests/common/scratch_dir.h"
#include "tests/online/ingest_server.h"
#include "tests/online/memory_event_log.h"
#include "tests/online/names.h"

using plumb::Status;

double LoadAverage() {
  double load[1] = {0};
  return getloadavg(load, 1) == 1 ? load[0] : -1;
}

// CPU seconds used by this process so far (client and server threads together).
double CpuSeconds() {
  rusage u;
  getrusage(RUSAGE_SELF, &u);
  return u.ru_utime.tv_sec + u.ru_stime.tv_sec + (u.ru_utime.tv_usec + u.ru_stime.tv_usec) / 1e6;
}
namespace store = plumb::store;
using plumb::online::GroupCommitOptions;
using plumb::online::IngestLimits;
using plumb::online::StoreEventLog;

int main(int argc, char** argv) {
  uint64_t events = 1'000'000;
  size_t chunk = 1000;
  std::vector<double> windows = {0.0, 10.0};
  bool sync = true;
  bool memory = false;  // an in-memory log instead of the store: the transport's share
  size_t max_group = plumb::online::GroupCommitOptions().max_group_events;
  std::string base;
  for (int i = 1; i < argc; ++i) {
    const std::string a = argv[i];
    auto next = [&] { return i + 1 < argc ? std::string(argv[++i]) : std::string(); };
    if (a == "--events") {
      events = std::strtoull(next().c_str(), nullptr, 10);
    } else if (a == "--chunk") {
      chunk = std::strtoull(next().c_str(), nullptr, 10);
    } else if (a == "--windows") {
      windows.clear();
      std::stringstream list(next());
      for (std::string w; std::getline(list, w, ',');) windows.push_back(std::atof(w.c_str()));
    } else if (a == "--max-group") {
      max_group = std::strtoull(next().c_str(), nullptr, 10);
    } else if (a == "--memory") {
      memory = true;
    } else if (a == "--no-sync") {
      sync = false;
    } else if (a == "--dir") {
      base = next();
    } else {
      std::fprintf(stderr,
                   "usage: ingest_rate [--events N] [--chunk N] [--windows 0,10] "
                   "[--max-group N] [--no-sync] [--memory] [--dir DIR]\n");
      return 2;
    }
  }

  // Events of the tool-lending scenario, built before the clock starts.
  std::vector<plumb::v1::InteractionEvent> wire(events);
  for (uint64_t i = 0; i < events; ++i) {
    wire[i] = plumb::online::testing::WireEvent(
        plumb::online::testing::Name("member-", i % 20'000),
        plumb::online::testing::Name("tool-", (i * 7919) % 5'000),
        plumb::online::testing::Name("loan-", i), 1.0f, 1'700'000'000'000 + i);
  }

  for (double window_ms : windows) {
    plumb::testing::ScratchDir scratch;
    const std::string dir = base.empty() ? scratch.Sub("db") : base + "/ingest-rate-db";
    std::unique_ptr<store::Store> db;
    store::StoreOptions options;
    options.sync = sync;
    if (Status s = store::Store::OpenPrimary(dir, options, &db); !s.ok()) {
      std::fprintf(stderr, "cannot open %s: %s\n", dir.c_str(), s.ToString().c_str());
      return 1;
    }
    StoreEventLog store_log(db.get());
    plumb::online::testing::MemoryEventLog memory_log;
    plumb::online::EventLog& log =
        memory ? static_cast<plumb::online::EventLog&>(memory_log) : store_log;
    GroupCommitOptions commit;
    commit.max_group_events = max_group;
    commit.window = std::chrono::microseconds(static_cast<int64_t>(window_ms * 1000));
    IngestLimits limits;
    limits.chunk_events = chunk;
    uint64_t acked = 0;
    double seconds = 0, cpu = 0;
    uint64_t groups = 0;
    {
      plumb::online::testing::IngestServer server(&log, nullptr, commit, limits);
      auto stub = server.Stub();
      grpc::ClientContext context;
      plumb::v1::PublishSummary summary;
      const auto start = std::chrono::steady_clock::now();
      const double cpu_start = CpuSeconds();
      auto writer = stub->Publish(&context, &summary);
      // buffer_hint lets gRPC coalesce messages into fewer frames (common practice for
      // high-rate client streams).
      const grpc::WriteOptions buffered = grpc::WriteOptions().set_buffer_hint();
      for (const auto& e : wire) {
        if (!writer->Write(e, buffered)) break;
      }
      writer->WritesDone();
      grpc::Status status = writer->Finish();
      seconds = std::chrono::duration<double>(std::chrono::steady_clock::now() - start).count();
      cpu = CpuSeconds() - cpu_start;
      if (!status.ok()) {
        std::fprintf(stderr, "Publish failed: %s\n", status.error_message().c_str());
        return 1;
      }
      acked = summary.accepted();
      groups = server.committer().stats().groups;
    }
    std::printf(
        "%s sync=%s window=%gms chunk=%zu: %llu events in %.2f s = %.0f events/s (%llu log "
        "writes, %.0f events per write; %.2f us CPU per event, client and server together; "
        "load average %.1f)\n",
        memory ? "memory log" : "store", sync ? "on" : "off", window_ms, chunk,
        static_cast<unsigned long long>(acked), seconds, acked / seconds,
        static_cast<unsigned long long>(groups), groups ? double(acked) / groups : 0.0,
        1e6 * cpu / static_cast<double>(acked), LoadAverage());
    if (acked != events) {
      std::fprintf(stderr, "only %llu of %llu events acknowledged\n",
                   static_cast<unsigned long long>(acked), static_cast<unsigned long long>(events));
      return 1;
    }
    if (!base.empty()) {
      db.reset();
      std::filesystem::remove_all(dir);
    }
  }
  return 0;
}
