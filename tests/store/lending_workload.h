// The invented workload of the crash test, shared by the child that writes it
// (append_child.cc) and the test that checks what survived (crash_test.cc): members of a
// neighbourhood tool-lending library borrowing tools. Everything a record holds is a pure
// function of its sequence number or version, so the checker can tell a stored record from
// a damaged or misplaced one without any record of its own.
#pragma once

#include <cstdint>
#include <string>

#include "store/store.h"

namespace plumb::store::testing {

inline constexpr uint32_t kMembers = 400;
inline constexpr uint32_t kTools = 250;
inline constexpr uint32_t kDim = 16;
inline constexpr uint32_t kRowsPerBlock = 64;
inline constexpr uint32_t kKeepVersions = 3;

// Member k borrows with index k; tool k has index k (the child adds them in that order).
inline uint32_t MemberOf(uint64_t seq) { return static_cast<uint32_t>(seq % kMembers); }
inline uint32_t ToolOf(uint64_t seq) {
  return static_cast<uint32_t>((seq * 7 + seq / 13) % kTools);
}
inline std::string MemberId(uint32_t k) { return "member-" + std::to_string(k); }
inline std::string ToolId(uint32_t k) { return "tool-" + std::to_string(k); }

// The loan that gets sequence number `seq` (sequence numbers are given in submission order).
inline EventInput LoanFor(uint64_t seq) {
  EventInput e;
  e.user_id = MemberId(MemberOf(seq));
  e.item_id = ToolId(ToolOf(seq));
  e.timestamp_ms = 1'700'000'000'000 + static_cast<int64_t>(seq) * 1000;
  e.event_id = "loan-" + std::to_string(seq);
  e.weight = 1.0f + static_cast<float>(seq % 3);
  return e;
}

// Embedding value of a version trained up to `events_seen`: small integers, exact in float32.
inline float EmbeddingValue(uint64_t events_seen, MatrixKind kind, uint32_t row, uint32_t col) {
  const uint64_t salt = kind == MatrixKind::kUsers ? 1 : 2;
  return static_cast<float>((events_seen * 31 + salt * 1009 + row * kDim + col) % 65521);
}

}  // namespace plumb::store::testing
