// Key layout: the byte strings store.h documents, and numeric order under bytewise order.
#include "store/keys.h"

#include <gtest/gtest.h>

#include <algorithm>
#include <random>

namespace plumb::store {
namespace {

std::string Bytes(std::initializer_list<int> bytes) {
  std::string out;
  for (int b : bytes) out.push_back(static_cast<char>(b));
  return out;
}

TEST(KeysTest, LayoutMatchesTheDocumentedBytes) {
  // Worked by hand from the layout comment in store.h.
  EXPECT_EQ(keys::EventKey(0x0102030405060708ULL), Bytes({1, 2, 3, 4, 5, 6, 7, 8}));
  EXPECT_EQ(keys::IdByExternalKey(IdSpace::kUser, "ana"), "uxana");
  EXPECT_EQ(keys::ExternalByIdKey(IdSpace::kItem, 258), Bytes({'i', 'n', 0, 0, 1, 2}));
  EXPECT_EQ(keys::InteractionKey(1, 65536), Bytes({0, 0, 0, 1, 0, 1, 0, 0}));
  EXPECT_EQ(keys::DegreeKey(7), Bytes({0, 0, 0, 7}));
  EXPECT_EQ(keys::ManifestKey(3), Bytes({'m', 0, 0, 0, 0, 0, 0, 0, 3}));
  EXPECT_EQ(keys::BlockKey(3, MatrixKind::kItems, 2),
            Bytes({'b', 0, 0, 0, 0, 0, 0, 0, 3, 'i', 0, 0, 0, 2}));
  EXPECT_EQ(keys::VersionDegreesKey(3, 2), Bytes({'d', 0, 0, 0, 0, 0, 0, 0, 3, 0, 0, 0, 2}));
  // Values: little-endian fixed width.
  EXPECT_EQ(keys::Fixed32(0x01020304), Bytes({4, 3, 2, 1}));
  EXPECT_EQ(keys::ParseFixed64(keys::Fixed64(0xdeadbeefcafeULL)), 0xdeadbeefcafeULL);
  EXPECT_EQ(keys::ParseFixed32("abc"), std::nullopt);
  EXPECT_EQ(keys::ParseManifestKey(keys::ManifestKey(99)), 99u);
  EXPECT_EQ(keys::ParseManifestKey(keys::BlockKey(99, MatrixKind::kUsers, 0)), std::nullopt);
  EXPECT_EQ(keys::ParseEventKey(keys::EventKey(12345)), 12345u);
}

TEST(KeysTest, DedupWindowBoundaries) {
  uint64_t seq = 0;
  int64_t received = 0;
  ASSERT_TRUE(keys::ParseEventIdRecord(keys::EventIdRecord(17, 1000), &seq, &received));
  EXPECT_EQ(seq, 17u);
  EXPECT_EQ(received, 1000);
  EXPECT_FALSE(keys::ParseEventIdRecord("short", &seq, &received));
  // The window is closed at its end: a copy exactly window_ms later is still a duplicate.
  EXPECT_TRUE(keys::WithinDedupWindow(1000, 1500, 500));
  EXPECT_FALSE(keys::WithinDedupWindow(1000, 1501, 500));
  EXPECT_TRUE(keys::WithinDedupWindow(1000, 1000 + 1'000'000'000, 0));  // 0: forever
}

TEST(KeysTest, BytewiseOrderIsNumericOrder) {
  std::mt19937_64 rng(7);
  std::vector<uint64_t> numbers = {0, 1, 255, 256, 65535, 65536, UINT32_MAX, UINT64_MAX};
  for (int k = 0; k < 500; ++k) numbers.push_back(rng() >> (rng() % 64));
  std::vector<std::string> event_keys, manifest_keys, interaction_keys;
  for (uint64_t n : numbers) {
    event_keys.push_back(keys::EventKey(n));
    manifest_keys.push_back(keys::ManifestKey(n));
    interaction_keys.push_back(
        keys::InteractionKey(static_cast<uint32_t>(n >> 32), static_cast<uint32_t>(n)));
  }
  std::sort(numbers.begin(), numbers.end());
  for (auto* list : {&event_keys, &manifest_keys, &interaction_keys})
    std::sort(list->begin(), list->end());
  for (size_t k = 0; k < numbers.size(); ++k) {
    EXPECT_EQ(keys::ParseEventKey(event_keys[k]), numbers[k]);
    EXPECT_EQ(keys::ParseManifestKey(manifest_keys[k]), numbers[k]);
    const uint64_t joined = (uint64_t{keys::ReadBigEndian32(interaction_keys[k].data())} << 32) |
                            keys::ReadBigEndian32(interaction_keys[k].data() + 4);
    EXPECT_EQ(joined, numbers[k]);
  }
}

}  // namespace
}  // namespace plumb::store
