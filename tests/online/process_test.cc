// plumb-train as a real process: SIGKILL at random moments while a client streams events,
// restart, resend what was not acknowledged; clean SIGTERM shutdown; refusals at start.
#include <grpcpp/generic/generic_stub.h>
#include <grpcpp/grpcpp.h>
#include <gtest/gtest.h>

#include <atomic>
#include <chrono>
#include <cstdlib>
#include <filesystem>
#include <future>
#include <map>
#include <random>
#include <string>
#include <thread>
#include <vector>

#include "plumb/v1/control.grpc.pb.h"
#include "plumb/v1/ingest.grpc.pb.h"
#include "store/store.h"
#include "tests/common/child_process.h"
#include "tests/common/scratch_dir.h"
#include "tests/online/names.h"

namespace plumb::online {
namespace {

using ::plumb::testing::ChildProcess;
using ::plumb::testing::FreeLoopbackPort;
using ::plumb::testing::ReadTail;
using ::plumb::testing::ScratchDir;
using testing::Name;

std::vector<std::string> TrainArgs(const std::string& db, int port) {
  return {PLUMB_TRAIN_BINARY, "--db", db, "--listen", Name("127.0.0.1:", port), "--metrics", "",
          "--log-level", "info",
          // Small and frequent training work, so that kills also land while the loop
          // trains and publishes.
          "--dim", "8", "--batch-size", "256", "--publish-every-events", "4000",
          "--publish-interval", "1s", "--min-train-pairs", "50", "--commit-window", "1ms"};
}

std::shared_ptr<grpc::Channel> Channel(int port) {
  grpc::ChannelArguments args;
  // Reconnect quickly to a restarted server (gRPC's default backoff starts at 1 s and grows).
  args.SetInt(GRPC_ARG_INITIAL_RECONNECT_BACKOFF_MS, 20);
  args.SetInt(GRPC_ARG_MIN_RECONNECT_BACKOFF_MS, 20);
  args.SetInt(GRPC_ARG_MAX_RECONNECT_BACKOFF_MS, 100);
  return grpc::CreateCustomChannel(Name("127.0.0.1:", port), grpc::InsecureChannelCredentials(),
                                   args);
}

plumb::v1::InteractionEvent LoanEvent(uint64_t i) {
  // The tool-lending scenario: members borrow tools; event ids are the loan numbers.
  plumb::v1::InteractionEvent e;
  e.set_user_id(Name("member-", i % 311));
  e.set_item_id(Name("tool-", (i * 7 + i / 311) % 97));
  e.set_event_id(Name("loan-", i));
  e.set_timestamp_ms(1'700'000'000'000 + static_cast<int64_t>(i));
  return e;
}

// Streams events [first, first + count) through Publish; the status of the call.
grpc::Status PublishLoans(plumb::v1::EventIngest::Stub* stub, uint64_t first, uint64_t count,
                          plumb::v1::PublishSummary* summary) {
  grpc::ClientContext context;
  context.set_wait_for_ready(true);
  context.set_deadline(std::chrono::system_clock::now() + std::chrono::seconds(10));
  auto writer = stub->Publish(&context, summary);
  const grpc::WriteOptions buffered = grpc::WriteOptions().set_buffer_hint();
  for (uint64_t i = first; i < first + count; ++i) {
    if (!writer->Write(LoanEvent(i), buffered)) break;
  }
  writer->WritesDone();
  return writer->Finish();
}

// The standard health check (grpc.health.v1.Health/Check for the whole server), spoken as
// raw bytes: an empty HealthCheckRequest, and a response whose field 1 is the status
// (SERVING = 1, so the bytes 08 01), per grpc/health/v1/health.proto.
std::string HealthCheck(const std::shared_ptr<grpc::Channel>& channel) {
  grpc::GenericStub stub(channel);
  grpc::ClientContext context;
  context.set_deadline(std::chrono::system_clock::now() + std::chrono::seconds(5));
  grpc::ByteBuffer request, response;
  grpc::Slice empty("", 0);
  request = grpc::ByteBuffer(&empty, 1);
  std::promise<grpc::Status> done;
  stub.UnaryCall(&context, "/grpc.health.v1.Health/Check", grpc::StubOptions(), &request, &response,
                 [&](grpc::Status s) { done.set_value(s); });
  grpc::Status status = done.get_future().get();
  if (!status.ok()) return "error: " + status.error_message();
  std::vector<grpc::Slice> slices;
  (void)response.Dump(&slices);
  std::string bytes;
  for (const grpc::Slice& slice : slices) {
    bytes.append(reinterpret_cast<const char*>(slice.begin()), slice.size());
  }
  return bytes;
}

Status ReadWholeLog(const std::string& db, std::vector<store::Event>* out, uint64_t* active_version,
                    bool* active_complete) {
  std::unique_ptr<store::Store> s;
  store::StoreOptions options;
  options.create_if_missing = false;
  PLUMB_RETURN_IF_ERROR(store::Store::OpenPrimary(db, options, &s));
  uint64_t after = 0;
  for (;;) {
    std::vector<store::Event> part;
    PLUMB_RETURN_IF_ERROR(s->ReadEvents(after, 20'000, &part));
    if (part.empty()) break;
    after = part.back().seq;
    out->insert(out->end(), part.begin(), part.end());
  }
  PLUMB_RETURN_IF_ERROR(s->GetActiveVersion(active_version));
  *active_complete = true;
  if (*active_version != 0) {
    store::VersionManifest m;
    PLUMB_RETURN_IF_ERROR(s->ReadManifest(*active_version, &m));
    std::vector<float> users(size_t{m.num_users} * m.dim), items(size_t{m.num_items} * m.dim);
    *active_complete = s->ReadMatrix(*active_version, store::MatrixKind::kUsers, users).ok() &&
                       s->ReadMatrix(*active_version, store::MatrixKind::kItems, items).ok();
  }
  return Status::Ok();
}

TEST(PlumbTrainProcess, AcknowledgedEventsSurviveSigkillAndResendsLeaveNoDuplicates) {
  ScratchDir dir;
  const std::string db = dir.Sub("db"), log = dir.Sub("plumb-train.log");
  const int port = FreeLoopbackPort();
  uint64_t seed = std::random_device()();
  if (const char* s = std::getenv("PLUMB_KILL_SEED")) seed = std::strtoull(s, nullptr, 10);
  std::printf("kill schedule seed %llu (PLUMB_KILL_SEED to repeat)\n",
              static_cast<unsigned long long>(seed));
  std::mt19937_64 rng(seed);

  // The client: chunks of random size, each resent with the same event_ids until a
  // summary acknowledges it.
  std::atomic<bool> stop_client{false};
  std::atomic<uint64_t> acked_events{0};
  std::atomic<int> failed_calls{0}, resent_chunks{0};
  // Resent chunks of which some events had been stored before the kill: acknowledged as
  // duplicates, not stored again.
  std::atomic<int> resends_with_duplicates{0};
  std::atomic<bool> client_ok{true};
  std::string client_error;
  const uint64_t client_seed = rng();
  const bool trace = std::getenv("PLUMB_KILL_LOG") != nullptr;
  std::thread client([&] {
    std::mt19937_64 crng(client_seed);
    auto stub = plumb::v1::EventIngest::NewStub(Channel(port));
    uint64_t next = 0;
    const auto give_up = std::chrono::steady_clock::now() + std::chrono::seconds(60);
    while (!stop_client.load()) {
      const uint64_t size = 1 + crng() % 2000;
      bool resent = false;
      for (;;) {
        plumb::v1::PublishSummary summary;
        const auto call_start = std::chrono::steady_clock::now();
        grpc::Status status = PublishLoans(stub.get(), next, size, &summary);
        if (trace) {
          std::printf("client: chunk at %llu size %llu: %s after %.0f ms\n",
                      static_cast<unsigned long long>(next), static_cast<unsigned long long>(size),
                      status.ok() ? "acknowledged" : status.error_message().c_str(),
                      std::chrono::duration<double, std::milli>(std::chrono::steady_clock::now() -
                                                                call_start)
                          .count());
        }
        if (status.ok()) {
          if (resent && summary.duplicates() > 0) ++resends_with_duplicates;
          if (summary.accepted() + summary.duplicates() != size || summary.rejected() != 0 ||
              (!resent && summary.duplicates() != 0)) {
            client_error = "chunk at " + std::to_string(next) + ": accepted " +
                           std::to_string(summary.accepted()) + ", duplicates " +
                           std::to_string(summary.duplicates()) + " of " + std::to_string(size);
            client_ok = false;
            return;
          }
          break;
        }
        ++failed_calls;
        if (!resent) ++resent_chunks;
        resent = true;
        if (std::chrono::steady_clock::now() > give_up) {
          client_error = "gave up resending: " + status.error_message();
          client_ok = false;
          return;
        }
        std::this_thread::sleep_for(std::chrono::milliseconds(5));
      }
      next += size;
      acked_events = next;
    }
  });

  constexpr int kRounds = 12;
  auto child = std::make_unique<ChildProcess>(TrainArgs(db, port), log);
  ASSERT_TRUE(child->started());
  std::uniform_int_distribution<int> from_start_ms(50, 600), from_serving_ms(0, 300);
  for (int round = 0; round < kRounds && client_ok.load(); ++round) {
    if (round % 2 == 0) {
      // A moment counted from the start: may land while the trainer opens the store and
      // rebuilds its state, or while it serves.
      std::this_thread::sleep_for(std::chrono::milliseconds(from_start_ms(rng)));
    } else {
      // A moment while it serves the stream: once this instance has acknowledged a chunk
      // (however slow the start on a loaded machine).
      const uint64_t acked_before = acked_events.load();
      const auto limit = std::chrono::steady_clock::now() + std::chrono::seconds(15);
      while (acked_events.load() == acked_before && client_ok.load() &&
             std::chrono::steady_clock::now() < limit) {
        std::this_thread::sleep_for(std::chrono::milliseconds(2));
      }
      std::this_thread::sleep_for(std::chrono::milliseconds(from_serving_ms(rng)));
    }
    child->Signal(SIGKILL);
    const int status = child->Wait();
    EXPECT_TRUE(WIFSIGNALED(status) && WTERMSIG(status) == SIGKILL)
        << "plumb-train ended on its own before kill " << round << ":\n"
        << ReadTail(log);
    child = std::make_unique<ChildProcess>(TrainArgs(db, port), log);
  }
  // Let the client get a few chunks through the last instance, then kill that one too.
  const uint64_t before = acked_events.load();
  const auto wait_until = std::chrono::steady_clock::now() + std::chrono::seconds(20);
  while (acked_events.load() < before + 1000 && client_ok.load() &&
         std::chrono::steady_clock::now() < wait_until) {
    std::this_thread::sleep_for(std::chrono::milliseconds(20));
  }
  stop_client = true;
  client.join();
  child->Signal(SIGKILL);
  child->Wait();
  ASSERT_TRUE(client_ok.load()) << client_error << "\n" << ReadTail(log);

  std::vector<store::Event> events;
  uint64_t active = 0;
  bool active_complete = false;
  Status s = ReadWholeLog(db, &events, &active, &active_complete);
  ASSERT_TRUE(s.ok()) << s.ToString();
  const uint64_t acked = acked_events.load();
  std::printf(
      "%d kills, %llu events acknowledged, %d failed calls, %d chunks resent (%d of "
      "them partly stored before the kill), active version %llu\n",
      kRounds, static_cast<unsigned long long>(acked), failed_calls.load(), resent_chunks.load(),
      resends_with_duplicates.load(), static_cast<unsigned long long>(active));
  EXPECT_GT(failed_calls.load(), 0) << "no kill interrupted a call";
  if (std::getenv("PLUMB_KILL_LOG")) std::printf("%s\n", ReadTail(log, 100000).c_str());

  // Every acknowledged event is in the log exactly once, and nothing else is: the client
  // resent every unacknowledged chunk until it was acknowledged.
  std::vector<int> seen(acked, 0);
  uint64_t strangers = 0;
  for (size_t k = 0; k < events.size(); ++k) {
    const store::Event& e = events[k];
    EXPECT_EQ(e.seq, k + 1) << "the log has a hole";
    const uint64_t i = std::strtoull(e.event_id.c_str() + 5, nullptr, 10);
    if (e.event_id.rfind("loan-", 0) != 0 || i >= acked) {
      ++strangers;
      continue;
    }
    ++seen[i];
    EXPECT_EQ(e.user_id, LoanEvent(i).user_id());
  }
  EXPECT_EQ(strangers, 0u);
  uint64_t missing = 0, doubled = 0;
  for (int c : seen) {
    missing += c == 0;
    doubled += c > 1;
  }
  EXPECT_EQ(missing, 0u);
  EXPECT_EQ(doubled, 0u);
  EXPECT_EQ(events.size(), acked);
  EXPECT_TRUE(active_complete) << "active version " << active << " is incomplete";
}

TEST(PlumbTrainProcess, SigtermShutsDownCleanlyAndASecondWriterIsRefused) {
  ScratchDir dir;
  const std::string db = dir.Sub("db"), log = dir.Sub("plumb-train.log");
  const int port = FreeLoopbackPort();
  ChildProcess child(TrainArgs(db, port), log);
  ASSERT_TRUE(child.started());

  auto channel = Channel(port);
  auto stub = plumb::v1::EventIngest::NewStub(channel);
  plumb::v1::PublishSummary summary;
  grpc::Status status = PublishLoans(stub.get(), 0, 2'000, &summary);
  ASSERT_TRUE(status.ok()) << status.error_message() << "\n" << ReadTail(log);
  EXPECT_EQ(summary.accepted(), 2'000u);
  EXPECT_EQ(summary.last_sequence(), 2'000u);

  auto control = plumb::v1::ModelControl::NewStub(channel);
  grpc::ClientContext context;
  plumb::v1::TrainerStatus trainer;
  ASSERT_TRUE(control->GetStatus(&context, plumb::v1::GetStatusRequest(), &trainer).ok());
  EXPECT_EQ(trainer.last_sequence(), 2'000u);
  EXPECT_EQ(trainer.objective(), "cpr");

  EXPECT_EQ(HealthCheck(channel), std::string("\x08\x01", 2));  // SERVING

  // A second plumb-train on the same store is refused with a clear message.
  const std::string log2 = dir.Sub("second.log");
  ChildProcess second(TrainArgs(db, FreeLoopbackPort()), log2);
  const int second_status = second.Wait();
  EXPECT_TRUE(WIFEXITED(second_status) && WEXITSTATUS(second_status) == 1);
  EXPECT_NE(ReadTail(log2).find("another plumb-train"), std::string::npos) << ReadTail(log2);

  child.Signal(SIGTERM);
  const int exit_status = child.Wait();
  EXPECT_TRUE(WIFEXITED(exit_status) && WEXITSTATUS(exit_status) == 0) << ReadTail(log);
  EXPECT_NE(ReadTail(log).find("stopped cleanly"), std::string::npos);

  std::vector<store::Event> events;
  uint64_t active = 0;
  bool complete = false;
  ASSERT_TRUE(ReadWholeLog(db, &events, &active, &complete).ok());
  EXPECT_EQ(events.size(), 2'000u);
}

TEST(PlumbTrainProcess, RefusesARemoteAddressWithoutAToken) {
  ScratchDir dir;
  const std::string log = dir.Sub("plumb-train.log");
  std::vector<std::string> args = TrainArgs(dir.Sub("db"), 0);
  args[4] = "0.0.0.0:0";
  ChildProcess child(args, log);
  const int status = child.Wait();
  EXPECT_TRUE(WIFEXITED(status) && WEXITSTATUS(status) == 2);
  EXPECT_NE(ReadTail(log).find("refusing to serve 0.0.0.0:0 without a bearer token"),
            std::string::npos)
      << ReadTail(log);
  // Nothing was opened: the refusal comes before the store.
  EXPECT_FALSE(std::filesystem::exists(dir.Sub("db")));
}

}  // namespace
}  // namespace plumb::online
