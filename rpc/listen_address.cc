#include "rpc/listen_address.h"

#include <arpa/inet.h>

#include <string>

namespace plumb::rpc {

bool IsLoopbackAddress(std::string_view address) {
  if (address.starts_with("unix:") || address.starts_with("unix-abstract:")) return true;
  if (address.starts_with("ipv4:")) address.remove_prefix(5);
  if (address.starts_with("ipv6:")) address.remove_prefix(5);
  std::string_view host;
  if (address.starts_with("[")) {
    const size_t close = address.find(']');
    if (close == std::string_view::npos) return false;
    host = address.substr(1, close - 1);
  } else {
    const size_t colon = address.rfind(':');
    host = colon == std::string_view::npos ? address : address.substr(0, colon);
  }
  if (host == "localhost") return true;
  const std::string h(host);
  in_addr v4;
  if (inet_pton(AF_INET, h.c_str(), &v4) == 1) {
    return (ntohl(v4.s_addr) >> 24) == 127;
  }
  in6_addr v6;
  if (inet_pton(AF_INET6, h.c_str(), &v6) == 1) {
    if (IN6_IS_ADDR_LOOPBACK(&v6)) return true;
    return IN6_IS_ADDR_V4MAPPED(&v6) && v6.s6_addr[12] == 127;
  }
  return false;
}

}  // namespace plumb::rpc
