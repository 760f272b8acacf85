// An in-process plumb.v1.EventIngest server on 127.0.0.1 (a free port chosen by the
// system) over a given EventLog, for tests.
#pragma once

#include <grpcpp/grpcpp.h>
#include <gtest/gtest.h>

#include <memory>
#include <string>

#include "plumb/v1/ingest.grpc.pb.h"
#include "tests/online/names.h"
#include "trainer/online/group_commit.h"
#include "trainer/online/ingest_service.h"
#include "trainer/online/train_metrics.h"

namespace plumb::online::testing {

class IngestServer {
 public:
  explicit IngestServer(EventLog* log, const rpc::BearerAuth* auth = nullptr,
                        GroupCommitOptions options = GroupCommitOptions(),
                        IngestLimits limits = IngestLimits())
      : committer_(log, nullptr, options),
        service_(&committer_, &metrics_, CallAdmission{auth, &inflight_}, limits) {
    grpc::ServerBuilder builder;
    builder.AddListeningPort("127.0.0.1:0", grpc::InsecureServerCredentials(), &port_);
    builder.RegisterService(&service_);
    builder.SetMaxReceiveMessageSize(16 << 20);
    server_ = builder.BuildAndStart();
    EXPECT_NE(server_, nullptr);
    EXPECT_NE(port_, 0);
  }
  ~IngestServer() {
    server_->Shutdown();
    committer_.Close();
  }

  std::unique_ptr<plumb::v1::EventIngest::Stub> Stub() const {
    grpc::ChannelArguments args;
    args.SetMaxSendMessageSize(16 << 20);
    return plumb::v1::EventIngest::NewStub(grpc::CreateCustomChannel(
        Name("127.0.0.1:", port_), grpc::InsecureChannelCredentials(), args));
  }

  TrainMetrics& metrics() { return metrics_; }
  InflightCalls& inflight() { return inflight_; }
  GroupCommitter& committer() { return committer_; }

 private:
  TrainMetrics metrics_;
  InflightCalls inflight_;
  GroupCommitter committer_;
  IngestService service_;
  std::unique_ptr<grpc::Server> server_;
  int port_ = 0;
};

inline plumb::v1::InteractionEvent WireEvent(const std::string& user, const std::string& item,
                                             const std::string& event_id = "", float weight = 1.0f,
                                             int64_t ts = 1'000) {
  plumb::v1::InteractionEvent e;
  e.set_user_id(user);
  e.set_item_id(item);
  e.set_event_id(event_id);
  e.set_weight(weight);
  e.set_timestamp_ms(ts);
  return e;
}

// Streams `events` through Publish and returns the call status.
template <typename Events>
grpc::Status Stream(plumb::v1::EventIngest::Stub* stub, const Events& events,
                    plumb::v1::PublishSummary* summary, const std::string& token = "") {
  grpc::ClientContext context;
  if (!token.empty()) context.AddMetadata("authorization", "Bearer " + token);
  auto writer = stub->Publish(&context, summary);
  for (const plumb::v1::InteractionEvent& e : events) {
    if (!writer->Write(e)) break;
  }
  writer->WritesDone();
  return writer->Finish();
}

}  // namespace plumb::online::testing
