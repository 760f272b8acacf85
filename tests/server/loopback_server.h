// Serving suites that call over real gRPC: a RankingServer for a service on a free loopback
// port with a channel to it (ServeOnLoopback), and plumb-serve in miniature following a store
// that the test writes as plumb-train would (FollowingServer).
#pragma once

#include <grpcpp/create_channel.h>

#include <memory>
#include <string>

#include "server/catch_up_loop.h"
#include "server/ranker_service.h"
#include "server/ranking_server.h"
#include "server/scorer.h"
#include "server/snapshot_holder.h"
#include "store/store.h"

namespace plumb::server::testing {

// Starts *server for `service` at 127.0.0.1:0 and sets *channel to it; the error of
// RankingServer::Start otherwise. `service` must outlive *server.
inline Status ServeOnLoopback(grpc::Service* service, std::unique_ptr<RankingServer>* server,
                              std::shared_ptr<grpc::Channel>* channel) {
  EndpointOptions endpoint;
  endpoint.listen = "127.0.0.1:0";
  PLUMB_RETURN_IF_ERROR(RankingServer::Start(endpoint, service, server));
  *channel = grpc::CreateChannel("127.0.0.1:" + std::to_string((*server)->port()),
                                 grpc::InsecureChannelCredentials());
  return Status::Ok();
}

// A secondary of the store at `db`, a catch-up loop into a holder, a RankerService (default
// limits) and its server on loopback. Members are destroyed in reverse: channel, server,
// service, loop (stopped), holder, store.
class FollowingServer {
 public:
  // Opens the secondary (its own files in `scratch`), runs one catch-up pass, starts the
  // server, then the loop's thread.
  // Served lists go to `exposure` (borrowed, may be null).
  Status Start(const std::string& db, const std::string& scratch, const CatchUpOptions& follow,
               ExposureSink* exposure = nullptr) {
    PLUMB_RETURN_IF_ERROR(store::Store::OpenSecondary(db, scratch, &secondary_));
    loop_ = std::make_unique<CatchUpLoop>(secondary_.get(), &holder_, follow);
    PLUMB_RETURN_IF_ERROR(loop_->RunOnce());
    service_ =
        std::make_unique<RankerService>(&holder_, &scorer_, RankerLimits{}, exposure, nullptr);
    PLUMB_RETURN_IF_ERROR(ServeOnLoopback(service_.get(), &server_, &channel_));
    loop_->Start();
    return Status::Ok();
  }

  // After a successful Start.
  SnapshotHolder& holder() { return holder_; }
  CatchUpLoop& loop() { return *loop_; }
  RankingServer& server() { return *server_; }
  std::shared_ptr<grpc::Channel> channel() const { return channel_; }

 private:
  std::unique_ptr<store::Store> secondary_;
  SnapshotHolder holder_;
  std::unique_ptr<CatchUpLoop> loop_;
  Scorer scorer_;
  std::unique_ptr<RankerService> service_;
  std::unique_ptr<RankingServer> server_;
  std::shared_ptr<grpc::Channel> channel_;
};

}  // namespace plumb::server::testing
