// Every Ranker request validator, and the scoring behind it: a wire message of any content
// (the first byte picks Recommend, RankCandidates or SimilarItems) is parsed and handed to
// RankerService as gRPC would, over a small fixed snapshot. An answer must be OK or one of
// the documented error codes, and an OK answer must respect the request (at most `count`
// items, every item id known).
#include <google/protobuf/stubs/logging.h>
#include <grpcpp/server_context.h>

#include <cmath>
#include <cstdint>
#include <cstdlib>
#include <memory>
#include <set>
#include <string>

#include "server/exposure_window.h"
#include "server/ranker_service.h"
#include "server/scorer.h"
#include "server/snapshot_holder.h"

namespace {

using plumb::server::Snapshot;

void Require(bool ok) {
  if (!ok) std::abort();
}

// 30 users x 60 items, dim 8, deterministic values, a few seen items per user; one item has
// a zero vector (SimilarItems must refuse it), and ids include a multi-byte UTF-8 one.
std::shared_ptr<const Snapshot> MakeSnapshot() {
  plumb::server::SnapshotParts p;
  p.version = 3;
  constexpr uint32_t kUsers = 30, kItems = 60, kDim = 8;
  Require(plumb::ItemMatrix::Create(kItems, kDim, &p.items).ok());
  Require(plumb::ItemMatrix::Create(kUsers, kDim, &p.users).ok());
  for (uint32_t i = 0; i < kItems * kDim; ++i) {
    p.items.data()[i] = i / kDim == 7 ? 0.0f : std::sin(0.37f * static_cast<float>(i));
  }
  for (uint32_t i = 0; i < kUsers * kDim; ++i) p.users.data()[i] = std::cos(0.11f * i);
  for (uint32_t i = 0; i < kItems; ++i) p.item_ids.push_back("tool-" + std::to_string(i));
  p.item_ids[5] = "t\xc3\xa9l\xc3\xa9";
  for (uint32_t u = 0; u < kUsers; ++u) p.user_ids.push_back("member-" + std::to_string(u));
  p.item_degrees.resize(kItems);
  for (uint32_t i = 0; i < kItems; ++i) p.item_degrees[i] = (i * 7) % 13;
  p.seen_offsets.push_back(0);
  for (uint32_t u = 0; u < kUsers; ++u) {
    for (uint32_t i = u % 5; i < kItems; i += 11) p.seen_items.push_back(i);
    p.seen_offsets.push_back(p.seen_items.size());
  }
  std::shared_ptr<const Snapshot> snap;
  Require(Snapshot::Build(std::move(p), &snap).ok());
  return snap;
}

struct Fixture {
  Fixture()
      : window(plumb::server::ExposureWindowOptions{}),
        service(&holder, &scorer, {}, &window, nullptr) {
    holder.Swap(MakeSnapshot());
    for (uint32_t i = 0; i < 60; ++i) items.insert(std::string(holder.Get()->item_id(i)));
  }
  plumb::server::SnapshotHolder holder;
  plumb::server::Scorer scorer;
  plumb::server::ExposureWindow window;
  plumb::server::RankerService service;
  std::set<std::string> items;
};

bool Documented(const grpc::Status& s) {
  switch (s.error_code()) {
    case grpc::StatusCode::OK:
    case grpc::StatusCode::INVALID_ARGUMENT:
    case grpc::StatusCode::NOT_FOUND:
    case grpc::StatusCode::FAILED_PRECONDITION:
      return true;
    default:
      return false;
  }
}

template <typename Response>
void CheckItems(const Fixture& f, const Response& r, uint32_t limit) {
  Require(static_cast<uint32_t>(r.items_size()) <= limit);
  for (const auto& item : r.items()) {
    Require(f.items.count(item.item_id()) == 1);
    Require(!std::isnan(item.score()));
  }
}

}  // namespace

// Invalid UTF-8 in a string field is a parse failure the target sees; protobuf would also
// log each one, which only slows the fuzzer down.
extern "C" int LLVMFuzzerInitialize(int*, char***) {
  google::protobuf::SetLogHandler(nullptr);
  return 0;
}

extern "C" int LLVMFuzzerTestOneInput(const uint8_t* data, size_t size) {
  static Fixture* f = new Fixture();
  if (size == 0) return 0;
  const void* wire = data + 1;
  const int n = static_cast<int>(size - 1);
  grpc::ServerContext context;
  switch (data[0] % 3) {
    case 0: {
      plumb::v1::RecommendRequest req;
      if (!req.ParseFromArray(wire, n)) return 0;  // gRPC would refuse it before us
      plumb::v1::RecommendResponse resp;
      const grpc::Status s = f->service.Recommend(&context, &req, &resp);
      Require(Documented(s));
      if (s.ok()) CheckItems(*f, resp, req.count());
      break;
    }
    case 1: {
      plumb::v1::RankCandidatesRequest req;
      if (!req.ParseFromArray(wire, n)) return 0;
      plumb::v1::RankCandidatesResponse resp;
      const grpc::Status s = f->service.RankCandidates(&context, &req, &resp);
      Require(Documented(s));
      if (s.ok()) CheckItems(*f, resp, static_cast<uint32_t>(req.candidate_item_ids_size()));
      break;
    }
    default: {
      plumb::v1::SimilarItemsRequest req;
      if (!req.ParseFromArray(wire, n)) return 0;
      plumb::v1::SimilarItemsResponse resp;
      const grpc::Status s = f->service.SimilarItems(&context, &req, &resp);
      Require(Documented(s));
      if (s.ok()) {
        CheckItems(*f, resp, req.count());
        for (const auto& item : resp.items()) Require(item.item_id() != req.item_id());
      }
      break;
    }
  }
  return 0;
}
