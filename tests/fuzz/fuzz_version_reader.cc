// The version reader, end to end: a version whose manifest, embedding blocks, degree blocks,
// id dictionary entries and interactions are whatever the input says is written behind the
// store's back (a raw RocksDB writer), then read the way plumb-serve reads one: a Store
// opened as a secondary catches up, LoadSnapshot reads and checks every block and builds the
// snapshot. It must either refuse the version with a Status (a block missing or of the
// wrong size, a non-finite value, an empty or repeated id, ...) or build a snapshot that then
// answers queries; never crash, never read past a block.
#include <unistd.h>

#include <cmath>
#include <cstdint>
#include <cstdlib>
#include <cstring>
#include <filesystem>
#include <memory>
#include <string>

#include "server/scorer.h"
#include "server/snapshot.h"
#include "store/keys.h"
#include "store/raw_records.h"
#include "store/records.h"
#include "store/store.h"
#include "tests/fuzz/fuzz_input.h"

namespace {

using namespace plumb;
using plumb::fuzz::FuzzInput;

void Require(bool ok) {
  if (!ok) std::abort();
}

// The store directory, removed at exit (the fixture itself lives until the process ends).
std::filesystem::path& StoreDir() {
  static std::filesystem::path dir;
  return dir;
}

struct Stores {
  Stores() {
    dir = std::filesystem::temp_directory_path() /
          ("plumb-fuzz-versions-" + std::to_string(::getpid()));
    StoreDir() = dir;
    std::atexit([] {
      std::error_code ec;
      std::filesystem::remove_all(StoreDir(), ec);
    });
    std::filesystem::remove_all(dir);
    std::filesystem::create_directories(dir);
    Require(store::testing::RawWriter::Open((dir / "db").string(), &writer).ok());
    Require(
        store::Store::OpenSecondary((dir / "db").string(), (dir / "follower").string(), &follower)
            .ok());
  }
  ~Stores() {
    follower.reset();
    writer.reset();
    std::filesystem::remove_all(dir);
  }
  std::filesystem::path dir;
  std::unique_ptr<store::testing::RawWriter> writer;
  std::unique_ptr<store::Store> follower;
  uint64_t next_version = 1;
};

// A block of `rows` x `row_bytes` from the input: usually the right size, sometimes not.
std::string Block(FuzzInput& in, size_t rows, size_t row_bytes) {
  const uint8_t shape = in.Take<uint8_t>();
  size_t size = rows * row_bytes;
  if (shape % 16 == 0) size = in.Below(static_cast<uint32_t>(size + 9));
  std::string out(size, '\0');
  for (size_t k = 0; k < size; ++k) out[k] = static_cast<char>(in.Take<uint8_t>());
  // Mostly small finite floats, so that many versions get as far as a snapshot.
  if (shape % 4 != 0 && row_bytes % 4 == 0) {
    for (size_t k = 0; k + 4 <= size; k += 4) {
      const float v = static_cast<float>(static_cast<int8_t>(out[k])) / 16.0f;
      std::memcpy(&out[k], &v, 4);
    }
  }
  return out;
}

}  // namespace

extern "C" int LLVMFuzzerTestOneInput(const uint8_t* data, size_t size) {
  static Stores* s = new Stores();
  FuzzInput in(data, size);
  const uint64_t version = s->next_version++;
  store::VersionManifest m;
  m.version = version;
  m.created_ms = 1;
  m.objective = "cpr";
  m.num_users = in.Below(12);
  m.num_items = in.Below(24);
  m.dim = in.Below(9);
  const uint32_t rpb = 1 + in.Below(6);
  const std::string manifest = in.Flag() ? in.Bytes(64) : store::records::EncodeManifest(m, rpb);
  auto& w = *s->writer;
  Require(w.Put(store::keys::kModelsFamily, store::keys::ManifestKey(version), manifest).ok());

  auto blocks = [&](uint32_t rows, size_t row_bytes, auto key_of) {
    for (uint32_t b = 0; rows > 0 && b <= (rows - 1) / rpb; ++b) {
      if (in.Take<uint8_t>() == 255) continue;  // a missing block
      const size_t n = std::min<size_t>(rpb, rows - b * rpb);
      Require(w.Put(store::keys::kModelsFamily, key_of(b), Block(in, n, row_bytes)).ok());
    }
  };
  const size_t row_bytes = size_t{m.dim} * sizeof(float);
  blocks(m.num_users, row_bytes,
         [&](uint32_t b) { return store::keys::BlockKey(version, store::MatrixKind::kUsers, b); });
  blocks(m.num_items, row_bytes,
         [&](uint32_t b) { return store::keys::BlockKey(version, store::MatrixKind::kItems, b); });
  blocks(m.num_items, sizeof(uint32_t),
         [&](uint32_t b) { return store::keys::VersionDegreesKey(version, b); });
  // Dictionary entries (possibly empty or repeated) and a few interactions.
  for (uint32_t u = 0; u < m.num_users; ++u) {
    const std::string id = in.Flag() ? in.Bytes(12) : "member-" + std::to_string(u);
    Require(
        w.Put(store::keys::kIdsFamily, store::keys::ExternalByIdKey(store::IdSpace::kUser, u), id)
            .ok());
  }
  for (uint32_t i = 0; i < m.num_items; ++i) {
    const std::string id = in.Flag() ? in.Bytes(12) : "tool-" + std::to_string(i);
    Require(
        w.Put(store::keys::kIdsFamily, store::keys::ExternalByIdKey(store::IdSpace::kItem, i), id)
            .ok());
  }
  for (int k = in.Below(8); k > 0; --k) {
    Require(w.Put(store::keys::kInteractionsFamily,
                  store::keys::InteractionKey(in.Below(m.num_users + 2), in.Below(m.num_items + 2)),
                  "")
                .ok());
  }

  if (!s->follower->CatchUp().ok()) return 0;
  std::shared_ptr<const server::Snapshot> snap;
  if (!server::LoadSnapshot(*s->follower, version, &snap).ok()) {
    Require(snap == nullptr);
    return 0;
  }
  // A snapshot that was built answers queries.
  Require(snap->num_users() == m.num_users && snap->num_items() == m.num_items);
  server::Scorer scorer;
  server::RankedList list;
  if (snap->num_users() > 0 && snap->num_items() > 0) {
    server::RecommendQuery q;
    const std::string user(snap->user_id(0));
    q.user_id = user;
    q.count = 5;
    q.exclude_seen = true;
    Require(scorer.Recommend(*snap, q, &list).ok());
    Require(list.items.size() <= 5);
    server::SimilarQuery sq;
    const std::string item(snap->item_id(0));
    sq.item_id = item;
    sq.count = 3;
    const Status ss = scorer.SimilarItems(*snap, sq, &list);
    Require(ss.ok() || ss.code() == Status::Code::kFailedPrecondition);
  }
  return 0;
}
