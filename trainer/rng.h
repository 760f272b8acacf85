// Rng: the trainer's pseudo-random generator. xoshiro256** (Blackman & Vigna, 2018) seeded
// through splitmix64, as its authors recommend. Chosen over <random> engines and
// distributions because the standard distributions are implementation-defined: the same seed
// must give the same embeddings on every standard library, and the sampler's hot loop wants
// a generator that is a few instructions per draw.
#pragma once

#include <cmath>
#include <cstdint>

namespace plumb::trainer {

// splitmix64 step (Steele, Lea & Flood 2014): a good 64-bit mixer, used to expand seeds and
// to derive independent streams from (seed, stream id) pairs.
inline uint64_t splitmix64(uint64_t* state) {
  uint64_t z = (*state += 0x9E3779B97F4A7C15ULL);
  z = (z ^ (z >> 30)) * 0xBF58476D1CE4E5B9ULL;
  z = (z ^ (z >> 27)) * 0x94D049BB133111EBULL;
  return z ^ (z >> 31);
}

// A stateless mix of a seed and up to two stream ids, for deriving per-row or per-thread
// seeds so that results do not depend on the order in which rows or threads are processed.
inline uint64_t mix_seed(uint64_t seed, uint64_t a, uint64_t b = 0) {
  uint64_t s = seed ^ 0x6A09E667F3BCC909ULL;
  splitmix64(&s);
  s ^= a * 0xD1B54A32D192ED03ULL;
  splitmix64(&s);
  s ^= b * 0x8CB92BA72F3D8DD7ULL;
  return splitmix64(&s);
}

// Not thread-safe: one Rng per thread. Copyable (a copy continues the same stream).
class Rng {
 public:
  explicit Rng(uint64_t seed = 1) { Seed(seed); }

  void Seed(uint64_t seed) {
    uint64_t sm = seed;
    for (auto& w : s_) w = splitmix64(&sm);
    has_spare_normal_ = false;
  }

  uint64_t Next() {
    const uint64_t result = rotl(s_[1] * 5, 7) * 9;
    const uint64_t t = s_[1] << 17;
    s_[2] ^= s_[0];
    s_[3] ^= s_[1];
    s_[1] ^= s_[2];
    s_[0] ^= s_[3];
    s_[2] ^= t;
    s_[3] = rotl(s_[3], 45);
    return result;
  }

  // Uniform integer in [0, n) for n >= 1, by Lemire's multiply-shift (2019) without the
  // rejection step: the bias is below n / 2^64, far under anything a trainer can notice.
  uint64_t Uniform(uint64_t n) {
    return static_cast<uint64_t>((static_cast<unsigned __int128>(Next()) * n) >> 64);
  }

  // Uniform double in [0, 1) with 53 random bits.
  double UniformDouble() { return static_cast<double>(Next() >> 11) * 0x1.0p-53; }

  // True with probability p (p <= 0 never, p >= 1 always).
  bool Bernoulli(double p) { return UniformDouble() < p; }

  // Standard normal by the Marsaglia polar method; deterministic given the stream.
  double Normal() {
    if (has_spare_normal_) {
      has_spare_normal_ = false;
      return spare_normal_;
    }
    double x, y, r2;
    do {
      x = 2.0 * UniformDouble() - 1.0;
      y = 2.0 * UniformDouble() - 1.0;
      r2 = x * x + y * y;
    } while (r2 >= 1.0 || r2 == 0.0);
    const double f = std::sqrt(-2.0 * std::log(r2) / r2);
    spare_normal_ = y * f;
    has_spare_normal_ = true;
    return x * f;
  }

 private:
  static uint64_t rotl(uint64_t x, int k) { return (x << k) | (x >> (64 - k)); }
  uint64_t s_[4];
  double spare_normal_ = 0.0;
  bool has_spare_normal_ = false;
};

}  // namespace plumb::trainer
