// The version bundle and its chunked wire format (replica/version_bundle.h): a version read
// from a store survives encode, chunking, reassembly and decode bit for bit, and the snapshot
// a replica builds from it equals the one plumb-serve loads from the store itself; every kind
// of damage to a chunk, the trailer or the bundle is detected.
#include "replica/version_bundle.h"

#include <gtest/gtest.h>

#include <cstring>
#include <string>
#include <vector>

#include "server/snapshot.h"
#include "tests/store/store_fixture.h"

namespace plumb::replica {
namespace {

using store::testing::StoreFixture;

class VersionBundleTest : public StoreFixture {
 protected:
  // A store with 5 users, 7 items, interactions and a withdrawn item; returns the version.
  uint64_t Populate() {
    AddIds(5, 7);
    store::StateChange pairs;
    pairs.new_interactions = {{0, 1}, {0, 4}, {2, 3}, {4, 0}, {4, 6}};
    EXPECT_TRUE(store_->Commit(pairs).ok());
    const uint64_t v = Publish(3, 2.0f, true);
    const std::vector<std::string> withdrawn = {"tool-3", "not-yet-known"};
    store::AvailabilityChange change;
    EXPECT_TRUE(store_->SetItemsWithdrawn(withdrawn, true, &change).ok());
    return v;
  }

  std::string Encoded(uint64_t v) {
    VersionBundle b;
    Status s = ReadVersionBundle(*store_, v, &b);
    EXPECT_TRUE(s.ok()) << s.ToString();
    std::string bytes;
    s = EncodeBundle(b, &bytes);
    EXPECT_TRUE(s.ok()) << s.ToString();
    return bytes;
  }

  // Reassembles `messages` (chunks then trailer) of version v.
  static Status Reassemble(uint64_t v, const std::vector<std::string>& messages, std::string* out,
                           uint64_t max_bytes = 1 << 30) {
    BundleAssembler a(v, max_bytes);
    for (size_t i = 0; i + 1 < messages.size(); ++i) PLUMB_RETURN_IF_ERROR(a.Add(messages[i]));
    return a.Finish(messages.back(), out);
  }
};

TEST_F(VersionBundleTest, RoundTripThroughChunksGivesTheSnapshotTheStoreGives) {
  const uint64_t v = Populate();
  const std::string bytes = Encoded(v);
  // 37-byte chunks: many chunks, the last one short.
  const std::vector<std::string> messages = CutIntoChunks(v, bytes, 37);
  ASSERT_EQ(messages.size(), (bytes.size() + 36) / 37 + 1);
  std::string back;
  Status s = Reassemble(v, messages, &back);
  ASSERT_TRUE(s.ok()) << s.ToString();
  EXPECT_EQ(back, bytes);

  VersionBundle b;
  s = DecodeBundle(back, &b);
  ASSERT_TRUE(s.ok()) << s.ToString();
  EXPECT_EQ(b.version, v);
  EXPECT_EQ(b.dim, 3u);
  EXPECT_EQ(b.objective, "cpr");
  EXPECT_EQ(b.item_ids.size(), 7u);
  EXPECT_EQ(b.user_ids[4], "member-4");
  EXPECT_EQ(b.seen_offsets, (std::vector<uint64_t>{0, 2, 2, 3, 3, 5}));
  EXPECT_EQ(b.seen_items, (std::vector<uint32_t>{1, 4, 3, 0, 6}));
  EXPECT_EQ(b.withdrawn_items, (std::vector<std::string>{"not-yet-known", "tool-3"}));
  // The matrices as MakeVersion wrote them (store_fixture.h PatternMatrix), exactly.
  const std::vector<float> items = store::testing::PatternMatrix(7, 3, 2.5f);
  ASSERT_EQ(b.items.rows(), 7u);
  EXPECT_EQ(std::memcmp(b.items.data(), items.data(), items.size() * sizeof(float)), 0);

  // What a replica serves equals what plumb-serve would load from the store directly.
  std::shared_ptr<const server::Snapshot> from_store;
  ASSERT_TRUE(server::LoadSnapshot(*store_, v, &from_store).ok());
  server::SnapshotParts parts;
  parts.version = b.version;
  parts.created_ms = b.created_ms;
  parts.items = std::move(b.items);
  parts.users = std::move(b.users);
  parts.item_ids = b.item_ids;
  parts.user_ids = b.user_ids;
  parts.item_degrees.assign(b.item_degrees.begin(), b.item_degrees.end());
  parts.seen_offsets = b.seen_offsets;
  parts.seen_items = b.seen_items;
  parts.target_group_shares = b.target_group_shares;
  std::shared_ptr<const server::Snapshot> from_bundle;
  s = server::Snapshot::Build(std::move(parts), &from_bundle);
  ASSERT_TRUE(s.ok()) << s.ToString();
  ASSERT_EQ(from_bundle->num_items(), from_store->num_items());
  ASSERT_EQ(from_bundle->num_users(), from_store->num_users());
  EXPECT_EQ(from_bundle->created_ms(), from_store->created_ms());
  for (uint32_t i = 0; i < from_store->num_items(); ++i) {
    EXPECT_EQ(from_bundle->item_id(i), from_store->item_id(i));
    EXPECT_EQ(from_bundle->item_degrees()[i], from_store->item_degrees()[i]);
    const auto a = from_bundle->item_vector(i), c = from_store->item_vector(i);
    EXPECT_EQ(std::memcmp(a.data(), c.data(), a.size() * sizeof(float)), 0);
  }
  for (uint32_t u = 0; u < from_store->num_users(); ++u) {
    EXPECT_EQ(from_bundle->user_id(u), from_store->user_id(u));
    const auto a = from_bundle->seen_items(u), c = from_store->seen_items(u);
    EXPECT_EQ(std::vector<uint32_t>(a.begin(), a.end()), std::vector<uint32_t>(c.begin(), c.end()));
  }
}

TEST_F(VersionBundleTest, OneChunkWhenTheBundleFitsAndAnEmptyBundleIsNotSpecial) {
  const uint64_t v = Populate();
  const std::string bytes = Encoded(v);
  EXPECT_EQ(CutIntoChunks(v, bytes, bytes.size()).size(), 2u);
  const std::vector<std::string> empty = CutIntoChunks(9, "", 100);
  ASSERT_EQ(empty.size(), 1u);  // the trailer alone
  std::string back = "x";
  ASSERT_TRUE(Reassemble(9, empty, &back).ok());
  EXPECT_EQ(back, "");
  Trailer t;
  ASSERT_TRUE(ParseTrailer(empty[0], &t).ok());
  EXPECT_EQ(t.chunks, 0u);
  EXPECT_EQ(t.total_bytes, 0u);
}

// CRC-32 check value: the CRC of the ASCII digits "123456789" is 0xCBF43926 for this
// polynomial (the "check" entry of CRC-32/ISO-HDLC in Greg Cook's catalogue of parametrised
// CRC algorithms).
TEST(Crc32Test, CheckValue) { EXPECT_EQ(Crc32("123456789"), 0xCBF43926u); }

TEST_F(VersionBundleTest, EveryDamageToTheMessagesIsDetected) {
  const uint64_t v = Populate();
  const std::string bytes = Encoded(v);
  const std::vector<std::string> good = CutIntoChunks(v, bytes, 64);
  ASSERT_GE(good.size(), 4u);
  std::string out;
  ASSERT_TRUE(Reassemble(v, good, &out).ok());

  struct Case {
    const char* what;
    std::vector<std::string> messages;
    uint64_t version;
  };
  std::vector<Case> cases;
  auto with = [&](const char* what, auto change) {
    std::vector<std::string> m = good;
    change(&m);
    cases.push_back({what, std::move(m), v});
  };
  with("a payload bit flipped", [](auto* m) { (*m)[1][30] ^= 0x04; });
  with("a chunk's CRC field changed", [](auto* m) { (*m)[0][20] ^= 0x01; });
  with("a chunk cut short", [](auto* m) { (*m)[2].resize((*m)[2].size() - 5); });
  with("a chunk cut inside its header", [](auto* m) { (*m)[2].resize(10); });
  with("a chunk's length field changed", [](auto* m) { (*m)[1][16] ^= 0x01; });
  with("a chunk missing", [](auto* m) { m->erase(m->begin() + 1); });
  with("the last chunk missing", [](auto* m) { m->erase(m->end() - 2); });
  with("a chunk repeated", [](auto* m) { m->insert(m->begin() + 2, (*m)[1]); });
  with("two chunks swapped", [](auto* m) { std::swap((*m)[1], (*m)[2]); });
  with("a chunk of another version",
       [&](auto* m) { (*m)[1] = CutIntoChunks(v + 1, bytes, 64)[1]; });
  with("a chunk's magic wrong", [](auto* m) { (*m)[0][0] = 'X'; });
  with("the trailer's total CRC wrong (trailer CRC fixed up)", [](auto* m) {
    std::string& t = m->back();
    t[24] ^= 0x10;
    const uint32_t crc = Crc32(std::string_view(t).substr(0, 28));
    std::memcpy(t.data() + 28, &crc, 4);
  });
  with("the trailer's size wrong (trailer CRC fixed up)", [](auto* m) {
    std::string& t = m->back();
    t[16] ^= 0x01;
    const uint32_t crc = Crc32(std::string_view(t).substr(0, 28));
    std::memcpy(t.data() + 28, &crc, 4);
  });
  with("the trailer's chunk count wrong (trailer CRC fixed up)", [](auto* m) {
    std::string& t = m->back();
    t[12] ^= 0x01;
    const uint32_t crc = Crc32(std::string_view(t).substr(0, 28));
    std::memcpy(t.data() + 28, &crc, 4);
  });
  with("a trailer bit flipped", [](auto* m) { m->back()[17] ^= 0x02; });
  with("the trailer cut short", [](auto* m) { m->back().resize(20); });
  with("a chunk in place of the trailer", [](auto* m) { m->back() = (*m)[0]; });
  with("the trailer of another version",
       [&](auto* m) { m->back() = CutIntoChunks(v + 1, bytes, 64).back(); });
  for (const Case& c : cases) {
    Status s = Reassemble(c.version, c.messages, &out);
    EXPECT_TRUE(s.IsCorruption()) << c.what << ": " << s.ToString();
  }
  // More bytes than the receiver accepts.
  EXPECT_TRUE(Reassemble(v, good, &out, bytes.size() - 1).IsCorruption());
}

TEST_F(VersionBundleTest, EveryDamageToTheBundleIsDetected) {
  const uint64_t v = Populate();
  const std::string bytes = Encoded(v);
  VersionBundle b;
  ASSERT_TRUE(DecodeBundle(bytes, &b).ok());
  // Any single bit flip anywhere (the CRC-32 detects every single-bit error).
  for (size_t at = 0; at < bytes.size(); ++at) {
    std::string damaged = bytes;
    damaged[at] ^= static_cast<char>(1 << (at % 8));
    EXPECT_FALSE(DecodeBundle(damaged, &b).ok()) << "bit flipped at byte " << at;
  }
  // Every truncation, and extra bytes.
  for (size_t len = 0; len < bytes.size(); ++len) {
    EXPECT_TRUE(DecodeBundle(std::string_view(bytes).substr(0, len), &b).IsCorruption())
        << "cut to " << len;
  }
  EXPECT_TRUE(DecodeBundle(bytes + "x", &b).IsCorruption());

  // A well-checksummed bundle whose counts lie: the structure checks catch what the CRC
  // cannot (a producer bug, not transport damage).
  auto resealed = [](std::string body) {
    body.resize(body.size() - 4);
    const uint32_t crc = Crc32(body);
    body.append(reinterpret_cast<const char*>(&crc), 4);
    return body;
  };
  std::string lying = bytes;
  const uint32_t huge = 0x7fffffff;
  std::memcpy(lying.data() + 8 + 8 + 8 + 4, &huge, 4);  // num_items
  Status s = DecodeBundle(resealed(lying), &b);
  EXPECT_TRUE(s.IsCorruption()) << s.ToString();
  lying = bytes;
  const uint32_t zero = 0;
  std::memcpy(lying.data() + 8 + 8 + 8, &zero, 4);  // dim
  EXPECT_TRUE(DecodeBundle(resealed(lying), &b).IsCorruption());
  lying = bytes;
  std::memcpy(lying.data() + 8 + 8 + 8 + 8, &zero, 4);  // num_users: bytes left over
  EXPECT_TRUE(DecodeBundle(resealed(lying), &b).IsCorruption());
}

TEST_F(VersionBundleTest, EncodeRefusesPartsThatDisagree) {
  const uint64_t v = Populate();
  VersionBundle b;
  ASSERT_TRUE(ReadVersionBundle(*store_, v, &b).ok());
  b.item_ids.pop_back();
  std::string out;
  EXPECT_EQ(EncodeBundle(b, &out).code(), Status::Code::kInvalidArgument);
}

TEST_F(VersionBundleTest, AVersionNotKeptIsNotFound) {
  VersionBundle b;
  EXPECT_TRUE(ReadVersionBundle(*store_, 77, &b).IsNotFound());
}

}  // namespace
}  // namespace plumb::replica
