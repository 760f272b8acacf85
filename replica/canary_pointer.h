// The canary's entry in the pointer bucket (README "Canary rollouts"): key `canary` beside key
// `active`, holding "<version> <share in basis points>" in decimal (e.g. "14 500" serves
// version 14 to 5 % of the subjects), or "none". plumb-train's VersionShipper writes it after
// the candidate's whole bundle is in the stream; every plumb-serve --replica-of reads it.
#pragma once

#include <charconv>
#include <cstdint>
#include <string>
#include <string_view>

namespace plumb::replica {

inline std::string FormatCanaryPointer(uint64_t version, uint32_t share_bp) {
  if (version == 0) return "none";
  return std::to_string(version) + " " + std::to_string(share_bp);
}

// False for anything but "none" (version 0) or a version >= 1 and a share of 1..10000.
inline bool ParseCanaryPointer(std::string_view text, uint64_t* version, uint32_t* share_bp) {
  while (!text.empty() && (text.back() == '\n' || text.back() == ' ')) text.remove_suffix(1);
  *version = 0;
  *share_bp = 0;
  if (text == "none") return true;
  const size_t space = text.find(' ');
  if (space == std::string_view::npos) return false;
  const std::string_view v = text.substr(0, space), s = text.substr(space + 1);
  uint64_t version_read = 0;
  uint32_t share_read = 0;
  auto a = std::from_chars(v.data(), v.data() + v.size(), version_read);
  auto b = std::from_chars(s.data(), s.data() + s.size(), share_read);
  if (a.ec != std::errc() || a.ptr != v.data() + v.size() || b.ec != std::errc() ||
      b.ptr != s.data() + s.size() || version_read == 0 || share_read == 0 || share_read > 10000) {
    return false;
  }
  *version = version_read;
  *share_bp = share_read;
  return true;
}

}  // namespace plumb::replica
