// server::ReplicaFeed's local directory, without NATS: what a restarted replica serves from
// its own disk, and that a damaged local bundle is refused (the NATS side is
// tests/stream/replicas_test.py).
#include "server/replica_feed.h"

#include <gtest/gtest.h>

#include <filesystem>
#include <fstream>

#include "replica/version_bundle.h"
#include "tests/common/scratch_dir.h"

namespace plumb::server {
namespace {

std::string SmallBundle(uint64_t version) {
  replica::VersionBundle b;
  b.version = version;
  b.created_ms = 1'700'000'000'000;
  b.dim = 2;
  EXPECT_TRUE(ItemMatrix::Create(3, 2, &b.items).ok());
  EXPECT_TRUE(ItemMatrix::Create(2, 2, &b.users).ok());
  for (size_t k = 0; k < 6; ++k) b.items.data()[k] = 0.5f * static_cast<float>(k + 1);
  for (size_t k = 0; k < 4; ++k) b.users.data()[k] = 1.0f;
  b.item_degrees = {1, 0, 2};
  b.item_ids = {"t1", "t2", "t3"};
  b.user_ids = {"u1", "u2"};
  b.seen_offsets = {0, 1, 2};
  b.seen_items = {0, 2};
  b.withdrawn_items = {"t2"};
  std::string bytes;
  EXPECT_TRUE(replica::EncodeBundle(b, &bytes).ok());
  return bytes;
}

class ReplicaFeedTest : public ::testing::Test {
 protected:
  void SetUp() override {
    dir_ = scratch_.Sub("replica");
    std::filesystem::create_directories(dir_ + "/versions");
  }
  void Write(const std::string& name, const std::string& bytes) {
    std::ofstream(dir_ + "/" + name, std::ios::binary) << bytes;
  }
  ReplicaOptions Options() {
    ReplicaOptions o;
    o.dir = dir_;
    o.access.servers = {"nats://127.0.0.1:1"};  // never started here
    return o;
  }
  testing::ScratchDir scratch_;
  std::string dir_;
};

TEST_F(ReplicaFeedTest, ServesThePointersVersionFromDiskAndItsWithdrawnItems) {
  Write("versions/7.bundle", SmallBundle(7));
  Write("versions/8.bundle.tmp", "half a file");  // an interrupted write
  Write("POINTER", "7\n");
  ReplicaFeed feed(Options());
  ASSERT_TRUE(feed.Open().ok());
  EXPECT_FALSE(std::filesystem::exists(dir_ + "/versions/8.bundle.tmp"));
  uint64_t active = 0;
  ASSERT_TRUE(feed.ActiveVersion(&active).ok());
  EXPECT_EQ(active, 7u);
  std::shared_ptr<const Snapshot> snap;
  std::vector<std::string> withdrawn;
  Status s = feed.Load(7, ApproxServingOptions{}, &snap, &withdrawn);
  ASSERT_TRUE(s.ok()) << s.ToString();
  EXPECT_EQ(snap->version(), 7u);
  EXPECT_EQ(snap->num_items(), 3u);
  EXPECT_EQ(snap->item_id(2), "t3");
  EXPECT_EQ(snap->item_degrees()[2], 2u);
  EXPECT_EQ(snap->seen_items(1).size(), 1u);
  EXPECT_EQ(withdrawn, (std::vector<std::string>{"t2"}));
}

TEST_F(ReplicaFeedTest, APointerToAVersionNotOnDiskServesNothing) {
  Write("POINTER", "9\n");
  ReplicaFeed feed(Options());
  ASSERT_TRUE(feed.Open().ok());
  uint64_t active = 1;
  ASSERT_TRUE(feed.ActiveVersion(&active).ok());
  EXPECT_EQ(active, 0u);
}

TEST_F(ReplicaFeedTest, ADamagedLocalBundleIsRefused) {
  std::string bytes = SmallBundle(7);
  bytes[bytes.size() / 2] ^= 0x40;
  Write("versions/7.bundle", bytes);
  Write("versions/8.bundle", SmallBundle(9));  // a file that names another version
  Write("POINTER", "7\n");
  ReplicaFeed feed(Options());
  ASSERT_TRUE(feed.Open().ok());
  std::shared_ptr<const Snapshot> snap;
  std::vector<std::string> withdrawn;
  uint64_t active = 0;
  ASSERT_TRUE(feed.ActiveVersion(&active).ok());
  EXPECT_EQ(active, 7u);
  EXPECT_TRUE(feed.Load(7, ApproxServingOptions{}, &snap, &withdrawn).IsCorruption());
  // The damaged file is dropped, so that the version is fetched again; nothing to serve
  // from this disk until then.
  EXPECT_FALSE(std::filesystem::exists(dir_ + "/versions/7.bundle"));
  ASSERT_TRUE(feed.ActiveVersion(&active).ok());
  EXPECT_EQ(active, 0u);
  EXPECT_TRUE(feed.Load(8, ApproxServingOptions{}, &snap, &withdrawn).IsCorruption());
  EXPECT_TRUE(feed.Load(5, ApproxServingOptions{}, &snap, &withdrawn).IsNotFound());
  EXPECT_EQ(snap, nullptr);
}

}  // namespace
}  // namespace plumb::server
