// Sample: the unit an objective trains on, a small fixed-size value (no allocation) so that
// samplers can draw thousands of candidates per batch cheaply.
//
//   CPR: k observed pairs (users[t], items[t]), t < k, distinct users, distinct items, every
//        cross pair (users[t], items[(t+1) % k]) unobserved. num_negatives = 0.
//   BPR: one observed pair (users[0], items[0]) and one unobserved item negatives[0].
//   BCE: one observed pair and num_negatives unobserved items for users[0].
#pragma once

#include <array>
#include <cstdint>

namespace plumb::trainer {

// Upper bound on CPR's k and on BCE's negatives per positive.
inline constexpr uint32_t kMaxSampleSlots = 8;

struct Sample {
  uint8_t k = 0;              // observed pairs in the sample (1 for BPR and BCE)
  uint8_t num_negatives = 0;  // unobserved items (BPR: 1, BCE: n, CPR: 0)
  std::array<uint32_t, kMaxSampleSlots> users{};
  std::array<uint32_t, kMaxSampleSlots> items{};
  std::array<uint32_t, kMaxSampleSlots> negatives{};
};

}  // namespace plumb::trainer
