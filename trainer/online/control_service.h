// ControlService: plumb.v1.ModelControl. Translates between the wire messages and the
// store (kept versions) and the online loop (status, activation); nothing else.
//
// Thread safety: the gRPC server calls the handlers from many threads at once; the store
// and the loop are thread-safe.
#pragma once

#include "plumb/v1/control.grpc.pb.h"
#include "trainer/online/call_admission.h"
#include "trainer/online/train_metrics.h"

namespace plumb::store {
class Store;
}

namespace plumb::online {

class OnlineLoop;

class ControlService final : public plumb::v1::ModelControl::Service {
 public:
  // `store` and `loop` (and what `admission` points to, and `metrics` if not null) must
  // outlive the service. Requests are decoded through rpc/checked_methods.h: one that cannot
  // be decoded gets INVALID_ARGUMENT naming the field. With `metrics`, every call is
  // counted (plumb_requests_total).
  ControlService(store::Store* store, OnlineLoop* loop, const CallAdmission& admission,
                 TrainMetrics* metrics = nullptr);

  grpc::Status ListVersions(grpc::ServerContext* context,
                            const plumb::v1::ListVersionsRequest* request,
                            plumb::v1::ListVersionsResponse* response) override;
  grpc::Status GetStatus(grpc::ServerContext* context, const plumb::v1::GetStatusRequest* request,
                         plumb::v1::TrainerStatus* response) override;
  // NOT_FOUND for a version that is not kept, FAILED_PRECONDITION for an incomplete one,
  // INVALID_ARGUMENT for version 0.
  grpc::Status Activate(grpc::ServerContext* context, const plumb::v1::ActivateRequest* request,
                        plumb::v1::ActivateResponse* response) override;
  grpc::Status SetAutoActivate(grpc::ServerContext* context,
                               const plumb::v1::SetAutoActivateRequest* request,
                               plumb::v1::TrainerStatus* response) override;
  // INVALID_ARGUMENT for a reason longer than 200 bytes or with control characters.
  grpc::Status Retrain(grpc::ServerContext* context, const plumb::v1::RetrainRequest* request,
                       plumb::v1::TrainerStatus* response) override;
  // NOT_FOUND for a version that is not kept, INVALID_ARGUMENT for version 0.
  grpc::Status SetCanary(grpc::ServerContext* context, const plumb::v1::SetCanaryRequest* request,
                         plumb::v1::TrainerStatus* response) override;
  grpc::Status EndCanary(grpc::ServerContext* context, const plumb::v1::EndCanaryRequest* request,
                         plumb::v1::TrainerStatus* response) override;
  grpc::Status SetPinned(grpc::ServerContext* context, const plumb::v1::SetPinnedRequest* request,
                         plumb::v1::VersionInfo* response) override;
  // INVALID_ARGUMENT for no ids, more than kMaxAvailabilityIds, or an id that is empty or
  // longer than kMaxAvailabilityIdBytes (nothing changes then).
  grpc::Status SetItemAvailability(grpc::ServerContext* context,
                                   const plumb::v1::SetItemAvailabilityRequest* request,
                                   plumb::v1::SetItemAvailabilityResponse* response) override;
  // INVALID_ARGUMENT for a limit above kMaxAvailabilityIds.
  grpc::Status ListWithdrawnItems(grpc::ServerContext* context,
                                  const plumb::v1::ListWithdrawnItemsRequest* request,
                                  plumb::v1::ListWithdrawnItemsResponse* response) override;

  static constexpr int kMaxAvailabilityIds = 100000;
  static constexpr size_t kMaxAvailabilityIdBytes = 256;

 private:
  void FillStatus(plumb::v1::TrainerStatus* out) const;

  store::Store* const store_;
  OnlineLoop* const loop_;
  const CallAdmission admission_;
};

}  // namespace plumb::online
