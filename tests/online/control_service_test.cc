// ModelControl over a real store and a running OnlineLoop, in process.
#include "trainer/online/control_service.h"

#include <grpcpp/grpcpp.h>
#include <gtest/gtest.h>

#include <chrono>
#include <cmath>
#include <thread>

#include "store/store.h"
#include "tests/common/scratch_dir.h"
#include "tests/online/names.h"
#include "trainer/online/group_commit.h"
#include "trainer/online/ingest_service.h"
#include "trainer/online/online_loop.h"

namespace plumb::online {
namespace {

using ::plumb::testing::ScratchDir;
using testing::Name;

// The tool-lending scenario: members in four neighbourhoods, each borrowing mostly the
// tools its own tool shed holds.
plumb::v1::PublishBatchRequest Loans(uint64_t first, uint64_t count) {
  plumb::v1::PublishBatchRequest request;
  for (uint64_t i = first; i < first + count; ++i) {
    const uint64_t h = (i * 2654435761u) & 0xffffffffu;  // Knuth's multiplicative hash
    const uint64_t member = i % 240, shed = member % 4;
    const uint64_t tool = shed * 20 + (h >> 12) % 20;
    plumb::v1::InteractionEvent* e = request.add_events();
    e->set_user_id(Name("member-", member));
    e->set_item_id(Name("tool-", tool));
    e->set_event_id(Name("loan-", i));
  }
  return request;
}

class ControlServiceTest : public ::testing::Test {
 protected:
  void SetUp() override {
    ASSERT_TRUE(store::Store::OpenPrimary(dir_.Sub("db"), store::StoreOptions(), &store_).ok());
    OnlineOptions options;
    options.dim = 8;
    options.min_train_pairs = 50;
    options.publish_every_events = 1'000'000'000;  // publish only when asked
    options.publish_every_seconds = 1e6;
    // Refits publish on their own when they land; most tests here count versions exactly.
    options.refit = refit_;
    options.tune = false;
    ASSERT_TRUE(OnlineLoop::Create(store_.get(), options, &loop_).ok());
    loop_->Start();
    log_ = std::make_unique<StoreEventLog>(store_.get());
    committer_ = std::make_unique<GroupCommitter>(
        log_.get(), [this] { loop_->NotifyAppended(); }, GroupCommitOptions());
    admission_ = CallAdmission{auth_.get(), &inflight_};
    ingest_ = std::make_unique<IngestService>(committer_.get(), &metrics_, admission_);
    control_ = std::make_unique<ControlService>(store_.get(), loop_.get(), admission_);
    grpc::ServerBuilder builder;
    int port = 0;
    builder.AddListeningPort("127.0.0.1:0", grpc::InsecureServerCredentials(), &port);
    builder.RegisterService(ingest_.get());
    builder.RegisterService(control_.get());
    server_ = builder.BuildAndStart();
    ASSERT_NE(server_, nullptr);
    auto channel =
        grpc::CreateChannel(Name("127.0.0.1:", port), grpc::InsecureChannelCredentials());
    ingest_stub_ = plumb::v1::EventIngest::NewStub(channel);
    control_stub_ = plumb::v1::ModelControl::NewStub(channel);
  }
  void TearDown() override {
    if (server_) server_->Shutdown();
    if (committer_) committer_->Close();
    if (loop_) loop_->Stop();
  }

  void Publish(uint64_t first, uint64_t count) {
    grpc::ClientContext context;
    plumb::v1::PublishSummary summary;
    ASSERT_TRUE(ingest_stub_->PublishBatch(&context, Loans(first, count), &summary).ok());
    ASSERT_EQ(summary.accepted(), count);
  }

  plumb::v1::TrainerStatus Status() {
    grpc::ClientContext context;
    plumb::v1::TrainerStatus status;
    EXPECT_TRUE(control_stub_->GetStatus(&context, plumb::v1::GetStatusRequest(), &status).ok());
    return status;
  }

  plumb::v1::ListVersionsResponse Versions() {
    grpc::ClientContext context;
    plumb::v1::ListVersionsResponse response;
    EXPECT_TRUE(
        control_stub_->ListVersions(&context, plumb::v1::ListVersionsRequest(), &response).ok());
    return response;
  }

  // Asks the loop for a version and waits until `count` versions are kept.
  bool WaitForVersions(int count) {
    loop_->RequestPublish();
    const auto until = std::chrono::steady_clock::now() + std::chrono::seconds(30);
    while (std::chrono::steady_clock::now() < until) {
      if (Versions().versions_size() >= count) return true;
      std::this_thread::sleep_for(std::chrono::milliseconds(20));
    }
    return false;
  }

  grpc::Status Activate(uint64_t version, plumb::v1::ActivateResponse* response) {
    grpc::ClientContext context;
    plumb::v1::ActivateRequest request;
    request.set_version(version);
    return control_stub_->Activate(&context, request, response);
  }

  bool refit_ = false;
  ScratchDir dir_;
  std::unique_ptr<rpc::BearerAuth> auth_;
  std::unique_ptr<store::Store> store_;
  std::unique_ptr<OnlineLoop> loop_;
  std::unique_ptr<StoreEventLog> log_;
  std::unique_ptr<GroupCommitter> committer_;
  TrainMetrics metrics_;
  InflightCalls inflight_;
  CallAdmission admission_;
  std::unique_ptr<IngestService> ingest_;
  std::unique_ptr<ControlService> control_;
  std::unique_ptr<grpc::Server> server_;
  std::unique_ptr<plumb::v1::EventIngest::Stub> ingest_stub_;
  std::unique_ptr<plumb::v1::ModelControl::Stub> control_stub_;
};

TEST_F(ControlServiceTest, StatusVersionsPromotionAndRollback) {
  plumb::v1::TrainerStatus status = Status();
  EXPECT_EQ(status.active_version(), 0u);
  EXPECT_EQ(status.last_sequence(), 0u);
  EXPECT_EQ(status.objective(), "cpr");
  EXPECT_TRUE(status.auto_activate());
  EXPECT_EQ(Versions().versions_size(), 0);

  plumb::v1::ActivateResponse activated;
  EXPECT_EQ(Activate(0, &activated).error_code(), grpc::StatusCode::INVALID_ARGUMENT);
  EXPECT_EQ(Activate(99, &activated).error_code(), grpc::StatusCode::NOT_FOUND);

  // First version: activated automatically.
  Publish(0, 3'000);
  ASSERT_TRUE(WaitForVersions(1));
  status = Status();
  EXPECT_EQ(status.last_sequence(), 3'000u);
  const uint64_t v1 = Versions().versions(0).version();
  EXPECT_EQ(status.active_version(), v1);
  EXPECT_EQ(status.num_users(), 240u);
  EXPECT_EQ(status.num_items(), 80u);

  // Automatic activation off: the next version is kept but not activated.
  {
    grpc::ClientContext context;
    plumb::v1::SetAutoActivateRequest request;
    request.set_enabled(false);
    plumb::v1::TrainerStatus after;
    ASSERT_TRUE(control_stub_->SetAutoActivate(&context, request, &after).ok());
    EXPECT_FALSE(after.auto_activate());
  }
  Publish(3'000, 2'000);
  ASSERT_TRUE(WaitForVersions(2));
  plumb::v1::ListVersionsResponse versions = Versions();
  ASSERT_EQ(versions.versions_size(), 2);
  const plumb::v1::VersionInfo& newest = versions.versions(0);  // newest first
  const plumb::v1::VersionInfo& oldest = versions.versions(1);
  EXPECT_GT(newest.version(), oldest.version());
  EXPECT_EQ(oldest.version(), v1);
  EXPECT_FALSE(newest.active());
  EXPECT_TRUE(oldest.active());
  EXPECT_EQ(newest.objective(), "cpr");
  EXPECT_EQ(newest.dim(), 8u);
  EXPECT_EQ(newest.num_items(), 80u);
  EXPECT_GT(newest.events_seen(), oldest.events_seen());
  EXPECT_GT(newest.created_ms(), 0);
  EXPECT_NE(newest.gate(), plumb::v1::GATE_OUTCOME_UNSPECIFIED);
  EXPECT_EQ(Status().active_version(), v1);

  // A human promotes it, then rolls back.
  ASSERT_TRUE(Activate(newest.version(), &activated).ok());
  EXPECT_EQ(activated.active_version(), newest.version());
  EXPECT_EQ(activated.previous_version(), v1);
  EXPECT_EQ(Status().active_version(), newest.version());
  EXPECT_TRUE(Versions().versions(0).active());
  ASSERT_TRUE(Activate(v1, &activated).ok());
  EXPECT_EQ(activated.previous_version(), newest.version());
  EXPECT_EQ(Status().active_version(), v1);
  EXPECT_FALSE(Status().auto_activate());
  EXPECT_NE(Status().auto_activate_reason().find("activated by request"), std::string::npos);
}

// Canary rollouts through ModelControl: refusals with their codes, start (automatic activation
// paused, new versions kept but not activated), widen, abort, promote; the status shows each.
TEST_F(ControlServiceTest, CanaryStartWidenAbortPromote) {
  auto set = [&](uint64_t version, double percent, plumb::v1::TrainerStatus* after) {
    grpc::ClientContext context;
    plumb::v1::SetCanaryRequest request;
    request.set_version(version);
    request.set_share_percent(percent);
    return control_stub_->SetCanary(&context, request, after);
  };
  auto end = [&](bool promote, plumb::v1::TrainerStatus* after) {
    grpc::ClientContext context;
    plumb::v1::EndCanaryRequest request;
    request.set_promote(promote);
    return control_stub_->EndCanary(&context, request, after);
  };
  plumb::v1::TrainerStatus after;
  EXPECT_EQ(end(false, &after).error_code(), grpc::StatusCode::FAILED_PRECONDITION);
  Publish(0, 3'000);
  ASSERT_TRUE(WaitForVersions(1));
  const uint64_t v1 = Versions().versions(0).version();
  Publish(3'000, 1'000);
  ASSERT_TRUE(WaitForVersions(2));
  const uint64_t v2 = Versions().versions(0).version();
  ASSERT_EQ(Status().active_version(), v2);  // automatic activation is on

  EXPECT_EQ(set(0, 5, &after).error_code(), grpc::StatusCode::INVALID_ARGUMENT);
  EXPECT_EQ(set(v1, 0, &after).error_code(), grpc::StatusCode::INVALID_ARGUMENT);
  EXPECT_EQ(set(v1, 0.004, &after).error_code(), grpc::StatusCode::INVALID_ARGUMENT);
  EXPECT_EQ(set(v1, 100.5, &after).error_code(), grpc::StatusCode::INVALID_ARGUMENT);
  EXPECT_EQ(set(v1, std::nan(""), &after).error_code(), grpc::StatusCode::INVALID_ARGUMENT);
  EXPECT_EQ(set(v2, 5, &after).error_code(), grpc::StatusCode::FAILED_PRECONDITION);  // active
  EXPECT_EQ(set(99, 5, &after).error_code(), grpc::StatusCode::NOT_FOUND);
  EXPECT_EQ(Status().canary_version(), 0u);
  EXPECT_TRUE(Status().auto_activate());  // nothing changed by the refusals

  // Start: v1 (the older one) to 5 % of the users; automatic activation pauses.
  ASSERT_TRUE(set(v1, 5, &after).ok());
  EXPECT_EQ(after.canary_version(), v1);
  EXPECT_DOUBLE_EQ(after.canary_share_percent(), 5.0);
  EXPECT_GT(after.canary_started_ms(), 0);
  EXPECT_FALSE(after.auto_activate());
  EXPECT_NE(after.auto_activate_reason().find("canary"), std::string::npos);
  // A new version meanwhile is kept, not activated.
  Publish(4'000, 1'000);
  ASSERT_TRUE(WaitForVersions(3));
  const uint64_t v3 = Versions().versions(0).version();
  EXPECT_EQ(Status().active_version(), v2);
  // Widen (the start time stays), then abort: the active version is untouched.
  const int64_t started = after.canary_started_ms();
  ASSERT_TRUE(set(v1, 12.34, &after).ok());
  EXPECT_DOUBLE_EQ(after.canary_share_percent(), 12.34);
  EXPECT_EQ(after.canary_started_ms(), started);
  ASSERT_TRUE(end(false, &after).ok());
  EXPECT_EQ(after.canary_version(), 0u);
  EXPECT_EQ(after.active_version(), v2);
  // Promote: a canary of v3, then made active.
  ASSERT_TRUE(set(v3, 50, &after).ok());
  ASSERT_TRUE(end(true, &after).ok());
  EXPECT_EQ(after.canary_version(), 0u);
  EXPECT_EQ(after.active_version(), v3);
  store::Canary stored;
  ASSERT_TRUE(store_->GetCanary(&stored).ok());
  EXPECT_EQ(stored.version, 0u);
  uint64_t active = 0;
  ASSERT_TRUE(store_->GetActiveVersion(&active).ok());
  EXPECT_EQ(active, v3);
}

// SetItemAvailability and ListWithdrawnItems: counts by hand from the ids sent; every invalid
// request is refused whole (the withdrawn set is unchanged afterwards); the set shows in the
// status; events for a withdrawn item are still accepted.
TEST_F(ControlServiceTest, WithdrawRestoreAndListItems) {
  auto set = [&](std::vector<std::string> ids, bool withdrawn,
                 plumb::v1::SetItemAvailabilityResponse* response) {
    grpc::ClientContext context;
    plumb::v1::SetItemAvailabilityRequest request;
    for (const std::string& id : ids) request.add_item_ids(id);
    request.set_withdrawn(withdrawn);
    return control_stub_->SetItemAvailability(&context, request, response);
  };
  plumb::v1::SetItemAvailabilityResponse r;
  // tool-3 twice and a tool no event has named yet: 3 changed, 1 repeat.
  ASSERT_TRUE(set({"tool-3", "tool-7", "tool-3", "tool-unseen"}, true, &r).ok());
  EXPECT_EQ(r.changed(), 3u);
  EXPECT_EQ(r.unchanged(), 1u);
  EXPECT_EQ(r.withdrawn_items(), 3u);
  ASSERT_TRUE(set({"tool-7", "tool-9"}, false, &r).ok());  // tool-9 was not withdrawn
  EXPECT_EQ(r.changed(), 1u);
  EXPECT_EQ(r.unchanged(), 1u);
  EXPECT_EQ(r.withdrawn_items(), 2u);

  EXPECT_EQ(set({}, true, &r).error_code(), grpc::StatusCode::INVALID_ARGUMENT);
  EXPECT_EQ(set({"tool-1", ""}, true, &r).error_code(), grpc::StatusCode::INVALID_ARGUMENT);
  const grpc::Status too_long = set({"tool-2", std::string(257, 'x')}, true, &r);
  EXPECT_EQ(too_long.error_code(), grpc::StatusCode::INVALID_ARGUMENT);
  EXPECT_NE(too_long.error_message().find("item_ids[1]"), std::string::npos)
      << too_long.error_message();

  auto list = [&](const std::string& start_after, uint32_t limit,
                  plumb::v1::ListWithdrawnItemsResponse* response) {
    grpc::ClientContext context;
    plumb::v1::ListWithdrawnItemsRequest request;
    request.set_start_after(start_after);
    request.set_limit(limit);
    return control_stub_->ListWithdrawnItems(&context, request, response);
  };
  plumb::v1::ListWithdrawnItemsResponse page;
  ASSERT_TRUE(list("", 1, &page).ok());
  ASSERT_EQ(page.items_size(), 1);
  EXPECT_EQ(page.items(0).item_id(), "tool-3");  // nothing of the refused requests stuck
  EXPECT_GT(page.items(0).withdrawn_ms(), 1'600'000'000'000);
  EXPECT_EQ(page.next_start_after(), "tool-3");
  EXPECT_EQ(page.withdrawn_items(), 2u);
  plumb::v1::ListWithdrawnItemsResponse rest;
  ASSERT_TRUE(list(page.next_start_after(), 1, &rest).ok());
  ASSERT_EQ(rest.items_size(), 1);
  EXPECT_EQ(rest.items(0).item_id(), "tool-unseen");
  EXPECT_TRUE(rest.next_start_after().empty());
  EXPECT_EQ(list("", 100001, &page).error_code(), grpc::StatusCode::INVALID_ARGUMENT);

  EXPECT_EQ(Status().withdrawn_items(), 2u);
  // Events naming a withdrawn item are accepted like any other.
  Publish(0, 200);
  const plumb::v1::TrainerStatus status = Status();
  EXPECT_EQ(status.log_events(), 200u);
  EXPECT_GT(status.log_bytes(), 200u * 8);
  EXPECT_EQ(status.retention_removed_events(), 0u);
}

class ControlServiceWithRefitsTest : public ControlServiceTest {
 protected:
  void SetUp() override {
    refit_ = true;
    ControlServiceTest::SetUp();
  }
};

// Retrain starts a rebuild from the whole log, reported in the status, and its result is
// published as a candidate whose training configuration says it covers every pair; versions
// and status carry the configuration. A reason over 200 bytes or with a control character is
// INVALID_ARGUMENT.
TEST_F(ControlServiceWithRefitsTest, RetrainRebuildsAndVersionsSayHowTheyWereTrained) {
  Publish(0, 3'000);
  ASSERT_TRUE(WaitForVersions(1));
  plumb::v1::TrainerStatus status = Status();
  EXPECT_EQ(status.training().origin(), "online");
  EXPECT_EQ(status.training().objective(), "cpr");
  EXPECT_EQ(status.training().dim(), 8u);
  EXPECT_EQ(status.training().beta(), 3.0);
  EXPECT_EQ(status.training().epochs(), 20u);
  const uint64_t done_before = [&] {
    // Let refits triggered by the first events settle.
    for (int i = 0; i < 300 && !Status().idle(); ++i) {
      std::this_thread::sleep_for(std::chrono::milliseconds(20));
    }
    return Status().refits_completed();
  }();
  const int kept = Versions().versions_size();

  plumb::v1::TrainerStatus after;
  {
    grpc::ClientContext context;
    plumb::v1::RetrainRequest request;
    request.set_reason("new tools arrived");
    ASSERT_TRUE(control_stub_->Retrain(&context, request, &after).ok());
  }
  const auto until = std::chrono::steady_clock::now() + std::chrono::seconds(60);
  while (Status().refits_completed() <= done_before && std::chrono::steady_clock::now() < until) {
    std::this_thread::sleep_for(std::chrono::milliseconds(20));
  }
  status = Status();
  EXPECT_GT(status.refits_completed(), done_before);
  EXPECT_NE(status.refit_reason().find("new tools arrived"), std::string::npos)
      << status.refit_reason();
  ASSERT_TRUE(WaitForVersions(kept + 1));
  const plumb::v1::VersionInfo newest = Versions().versions(0);
  EXPECT_EQ(newest.training().origin(), "online");
  EXPECT_EQ(newest.training().refit_pairs(), newest.num_interactions());
  EXPECT_EQ(status.refit_pairs(), status.train_pairs());

  for (const std::string& bad : {std::string(201, 'x'), std::string("line\nbreak")}) {
    grpc::ClientContext context;
    plumb::v1::RetrainRequest request;
    request.set_reason(bad);
    EXPECT_EQ(control_stub_->Retrain(&context, request, &after).error_code(),
              grpc::StatusCode::INVALID_ARGUMENT);
  }
}

class ControlServiceWithTokenTest : public ControlServiceTest {
 protected:
  void SetUp() override {
    auth_ = std::make_unique<rpc::BearerAuth>("shed-key-42");
    ControlServiceTest::SetUp();
  }
};

TEST_F(ControlServiceWithTokenTest, EveryControlCallNeedsTheToken) {
  plumb::v1::TrainerStatus status;
  plumb::v1::ListVersionsResponse versions;
  plumb::v1::ActivateResponse activated;
  plumb::v1::ActivateRequest activate;
  activate.set_version(1);
  plumb::v1::SetAutoActivateRequest set_auto;
  {
    grpc::ClientContext c;
    EXPECT_EQ(control_stub_->GetStatus(&c, {}, &status).error_code(),
              grpc::StatusCode::UNAUTHENTICATED);
  }
  {
    grpc::ClientContext c;
    EXPECT_EQ(control_stub_->ListVersions(&c, {}, &versions).error_code(),
              grpc::StatusCode::UNAUTHENTICATED);
  }
  {
    grpc::ClientContext c;
    c.AddMetadata("authorization", "Bearer wrong");
    EXPECT_EQ(control_stub_->Activate(&c, activate, &activated).error_code(),
              grpc::StatusCode::UNAUTHENTICATED);
  }
  {
    grpc::ClientContext c;
    EXPECT_EQ(control_stub_->SetAutoActivate(&c, set_auto, &status).error_code(),
              grpc::StatusCode::UNAUTHENTICATED);
    EXPECT_TRUE(loop_->status().auto_activate);  // unchanged
  }
  {
    grpc::ClientContext c;
    EXPECT_EQ(control_stub_->Retrain(&c, {}, &status).error_code(),
              grpc::StatusCode::UNAUTHENTICATED);
  }
  {
    grpc::ClientContext c;
    c.AddMetadata("authorization", "Bearer shed-key-42");
    EXPECT_TRUE(control_stub_->GetStatus(&c, {}, &status).ok());
  }
}

}  // namespace
}  // namespace plumb::online
