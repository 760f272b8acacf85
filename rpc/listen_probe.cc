#include "rpc/listen_probe.h"

#include <netdb.h>
#include <sys/socket.h>
#include <unistd.h>

#include <cerrno>
#include <cstring>

namespace plumb::rpc {
namespace {

bool AllDigits(const std::string& s) {
  if (s.empty()) return false;
  for (char c : s) {
    if (c < '0' || c > '9') return false;
  }
  return true;
}

}  // namespace

Status ProbeListenAddress(const std::string& address, const std::string& what) {
  std::string host, port;
  if (AllDigits(address)) {
    port = address;
  } else if (!address.empty() && address.front() == '[') {
    const size_t close = address.find(']');
    if (close == std::string::npos || close + 1 >= address.size() || address[close + 1] != ':') {
      return Status::Ok();  // not HOST:PORT: the server reports what it makes of it
    }
    host = address.substr(1, close - 1);
    port = address.substr(close + 2);
  } else {
    const size_t colon = address.rfind(':');
    if (colon == std::string::npos || address.find(':') != colon) return Status::Ok();
    host = address.substr(0, colon);
    port = address.substr(colon + 1);
    if (host == "unix" || host == "unix-abstract" || host == "vsock") return Status::Ok();
  }
  if (!AllDigits(port)) {
    return Status::InvalidArgument(what + " address '" + address + "': port '" + port +
                                   "' is not a number");
  }
  if (port.find_first_not_of('0') == std::string::npos) return Status::Ok();  // port 0

  addrinfo hints{};
  hints.ai_family = AF_UNSPEC;
  hints.ai_socktype = SOCK_STREAM;
  hints.ai_flags = AI_PASSIVE | AI_NUMERICSERV;
  addrinfo* found = nullptr;
  const int rc = getaddrinfo(host.empty() || host == "*" ? nullptr : host.c_str(), port.c_str(),
                             &hints, &found);
  if (rc != 0) {
    return Status::InvalidArgument(what + " address '" + address + "': cannot resolve '" + host +
                                   "': " + gai_strerror(rc));
  }
  Status result;
  for (addrinfo* a = found; a != nullptr && result.ok(); a = a->ai_next) {
    const int fd = socket(a->ai_family, a->ai_socktype | SOCK_CLOEXEC, a->ai_protocol);
    if (fd < 0) continue;  // e.g. no IPv6 on this machine: nothing can be bound there
    const int one = 1;
    setsockopt(fd, SOL_SOCKET, SO_REUSEADDR, &one, sizeof one);
    if (a->ai_family == AF_INET6) setsockopt(fd, IPPROTO_IPV6, IPV6_V6ONLY, &one, sizeof one);
    if (bind(fd, a->ai_addr, a->ai_addrlen) != 0) {
      const int error = errno;
      if (error == EADDRINUSE) {
        result = Status::FailedPrecondition(
            "address in use: " + what + " address " + address +
            " is already bound by another process (is another plumb-serve or plumb-train "
            "running there?); stop it or choose another port");
      } else if (error != EADDRNOTAVAIL && error != EAFNOSUPPORT) {
        result = Status::IoError("cannot bind " + what + " address " + address + ": " +
                                 std::strerror(error));
      }
    }
    close(fd);
  }
  freeaddrinfo(found);
  return result;
}

}  // namespace plumb::rpc
