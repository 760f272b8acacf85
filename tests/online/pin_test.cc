// ModelControl.SetPinned over a real store: a pinned version shows as pinned, survives the
// retention rules, and the errors are the documented ones.
#include <grpcpp/grpcpp.h>
#include <gtest/gtest.h>

#include "store/store.h"
#include "tests/online/names.h"
#include "tests/store/store_fixture.h"
#include "trainer/online/control_service.h"
#include "trainer/online/online_loop.h"

namespace plumb::online {
namespace {

using testing::Name;

class PinTest : public store::testing::StoreFixture {
 protected:
  void SetUp() override {
    StoreFixture::SetUp();
    store::StoreOptions options = store::testing::TestOptions();
    options.keep_versions = 2;
    options.keep_versions_for_ms = 0;  // by count only: what survives is down to the pin
    Open(options);
    AddIds(6, 5);
    for (int v = 1; v <= 2; ++v) Publish(2, static_cast<float>(v), v == 1);
    OnlineOptions loop_options;
    loop_options.dim = 2;  // the dimension of the versions above (the loop warm-starts)
    Status s = OnlineLoop::Create(store_.get(), loop_options, &loop_);
    ASSERT_TRUE(s.ok()) << s.ToString();
    control_ = std::make_unique<ControlService>(store_.get(), loop_.get(),
                                                CallAdmission{nullptr, &inflight_}, &metrics_);
    grpc::ServerBuilder builder;
    int port = 0;
    builder.AddListeningPort("127.0.0.1:0", grpc::InsecureServerCredentials(), &port);
    builder.RegisterService(control_.get());
    server_ = builder.BuildAndStart();
    ASSERT_NE(server_, nullptr);
    stub_ = plumb::v1::ModelControl::NewStub(
        grpc::CreateChannel(Name("127.0.0.1:", port), grpc::InsecureChannelCredentials()));
  }
  void TearDown() override {
    if (server_) server_->Shutdown();
  }

  grpc::Status SetPinned(uint64_t version, bool pinned, plumb::v1::VersionInfo* info) {
    grpc::ClientContext context;
    plumb::v1::SetPinnedRequest request;
    request.set_version(version);
    request.set_pinned(pinned);
    return stub_->SetPinned(&context, request, info);
  }
  std::vector<std::pair<uint64_t, bool>> Listed() {
    grpc::ClientContext context;
    plumb::v1::ListVersionsResponse response;
    EXPECT_TRUE(stub_->ListVersions(&context, plumb::v1::ListVersionsRequest(), &response).ok());
    std::vector<std::pair<uint64_t, bool>> out;
    for (const auto& v : response.versions()) out.emplace_back(v.version(), v.pinned());
    return out;
  }

  InflightCalls inflight_;
  TrainMetrics metrics_;
  std::unique_ptr<OnlineLoop> loop_;
  std::unique_ptr<ControlService> control_;
  std::unique_ptr<grpc::Server> server_;
  std::unique_ptr<plumb::v1::ModelControl::Stub> stub_;
};

TEST_F(PinTest, APinnedVersionIsListedAndOutlivesTheRetentionRules) {
  plumb::v1::VersionInfo info;
  grpc::Status s = SetPinned(2, true, &info);
  ASSERT_TRUE(s.ok()) << s.error_message();
  EXPECT_EQ(info.version(), 2u);
  EXPECT_TRUE(info.pinned());
  EXPECT_FALSE(info.active());  // version 1 is active
  for (int v = 3; v <= 5; ++v) Publish(2, static_cast<float>(v), false);
  // keep_versions = 2: 5 and 4 by rank, 2 pinned, 1 active; 3 pruned.
  EXPECT_EQ(Listed(), (std::vector<std::pair<uint64_t, bool>>{
                          {5, false}, {4, false}, {2, true}, {1, false}}));

  ASSERT_TRUE(SetPinned(2, false, &info).ok());
  EXPECT_FALSE(info.pinned());
  Publish(2, 6, false);
  EXPECT_EQ(Listed(), (std::vector<std::pair<uint64_t, bool>>{{6, false}, {5, false}, {1, false}}));
  EXPECT_EQ(metrics_.calls("SetPinned", "OK"), 2.0);
}

TEST_F(PinTest, UnknownVersionIsNotFoundAndZeroIsInvalid) {
  plumb::v1::VersionInfo info;
  grpc::Status s = SetPinned(99, true, &info);
  EXPECT_EQ(s.error_code(), grpc::StatusCode::NOT_FOUND) << s.error_message();
  EXPECT_NE(s.error_message().find("version 99"), std::string::npos) << s.error_message();
  s = SetPinned(0, true, &info);
  EXPECT_EQ(s.error_code(), grpc::StatusCode::INVALID_ARGUMENT) << s.error_message();
  EXPECT_EQ(metrics_.calls("SetPinned", "NOT_FOUND"), 1.0);
  EXPECT_EQ(metrics_.calls("SetPinned", "INVALID_ARGUMENT"), 1.0);
}

}  // namespace
}  // namespace plumb::online
