// CanaryBucket: which subjects a canary serves (README "Canary rollouts").
//
// A subject (the user id of Recommend and RankCandidates, the item id of SimilarItems) falls in
// bucket 0..9999 of a candidate version, and is served the candidate when its bucket is below
// the canary's share in basis points. The rule, so that any language can reproduce it:
//   h = FNV-1a 64 of the subject's bytes (offset basis 0xcbf29ce484222325, prime
//       0x100000001b3)
//   x = h XOR (version * 0x9e3779b97f4a7c15)            (mod 2^64)
//   x = the splitmix64 finaliser of x: x ^= x >> 30; x *= 0xbf58476d1ce4e5b9;
//       x ^= x >> 27; x *= 0x94d049bb133111eb; x ^= x >> 31
//   bucket = x mod 10000
// The same subject always lands in the same bucket of a version, on every replica and after
// every restart; widening a share keeps every subject already in the canary; each candidate
// version draws its own subset.
#pragma once

#include <cstdint>
#include <string_view>

namespace plumb {

inline constexpr uint32_t kCanaryBuckets = 10000;  // 1 bucket = 1 basis point = 0.01 %

inline uint64_t Fnv1a64(std::string_view bytes) {
  uint64_t h = 0xcbf29ce484222325ULL;
  for (unsigned char c : bytes) {
    h ^= c;
    h *= 0x100000001b3ULL;
  }
  return h;
}

inline uint32_t CanaryBucket(std::string_view subject, uint64_t version) {
  uint64_t x = Fnv1a64(subject) ^ (version * 0x9e3779b97f4a7c15ULL);
  x ^= x >> 30;
  x *= 0xbf58476d1ce4e5b9ULL;
  x ^= x >> 27;
  x *= 0x94d049bb133111ebULL;
  x ^= x >> 31;
  return static_cast<uint32_t>(x % kCanaryBuckets);
}

// True when `subject` is served version `version` under a canary of `share_bp` basis points.
inline bool InCanary(std::string_view subject, uint64_t version, uint32_t share_bp) {
  return CanaryBucket(subject, version) < share_bp;
}

}  // namespace plumb
