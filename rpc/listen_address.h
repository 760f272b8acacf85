// Whether a listen address can be reached from other machines: an endpoint without a
// token should only listen where nobody else can call it.
#pragma once

#include <string_view>

namespace plumb::rpc {

// True for listen addresses only reachable from this machine: 127.0.0.0/8, ::1,
// "localhost", and unix-domain sockets ("unix:..."). False for wildcards (0.0.0.0, [::]),
// other addresses and other host names.
bool IsLoopbackAddress(std::string_view listen_address);

}  // namespace plumb::rpc
