// Checking, before a server starts, that its listening address is free.
//
// gRPC's listeners and the metrics endpoint's bind their port without SO_REUSEPORT (plumb
// turns gRPC's default port reuse off), so a second process on a port already in use fails
// to start instead of sharing the port's calls with the first. ProbeListenAddress tells that
// case apart early and with a clear message, before a process opens its store.
#pragma once

#include <string>

#include "core/status.h"

namespace plumb::rpc {

// Tries to bind a TCP socket (SO_REUSEADDR, as the servers set it, and no SO_REUSEPORT) to
// every address `address` resolves to, then closes it. `address` is HOST:PORT, [IPV6]:PORT
// or a bare PORT (all interfaces). Returns:
//   OK                 the address can be bound now (or it is not a TCP address this probe
//                      understands, such as unix:PATH, or the port is 0: the server decides);
//   FailedPrecondition "address in use: ..." when another socket is bound there;
//   InvalidArgument    for a host that does not resolve or a port that is not a number;
//   IoError            for any other bind failure (e.g. permission denied), with its reason.
// `what` names the endpoint in the message ("gRPC", "metrics"). Thread-safe. The answer can
// be stale a moment later; servers still check their own bind.
Status ProbeListenAddress(const std::string& address, const std::string& what);

}  // namespace plumb::rpc
