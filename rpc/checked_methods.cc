#include "rpc/checked_methods.h"

#include <google/protobuf/descriptor.h>

#include <cstdio>
#include <cstdlib>
#include <iterator>

namespace plumb::rpc {

const char* GrpcCodeName(grpc::StatusCode code) {
  static const char* const kNames[] = {"OK",
                                       "CANCELLED",
                                       "UNKNOWN",
                                       "INVALID_ARGUMENT",
                                       "DEADLINE_EXCEEDED",
                                       "NOT_FOUND",
                                       "ALREADY_EXISTS",
                                       "PERMISSION_DENIED",
                                       "RESOURCE_EXHAUSTED",
                                       "FAILED_PRECONDITION",
                                       "ABORTED",
                                       "OUT_OF_RANGE",
                                       "UNIMPLEMENTED",
                                       "INTERNAL",
                                       "UNAVAILABLE",
                                       "DATA_LOSS",
                                       "UNAUTHENTICATED"};
  const int c = static_cast<int>(code);
  return c >= 0 && c < static_cast<int>(std::size(kNames)) ? kNames[c] : "UNKNOWN";
}

int MethodIndex(const std::string& service, const std::string& method) {
  const google::protobuf::ServiceDescriptor* s =
      google::protobuf::DescriptorPool::generated_pool()->FindServiceByName(service);
  const google::protobuf::MethodDescriptor* m = s ? s->FindMethodByName(method) : nullptr;
  if (m == nullptr) {
    std::fprintf(stderr, "plumb: no method %s/%s in the linked protocol\n", service.c_str(),
                 method.c_str());
    std::abort();
  }
  return m->index();
}

}  // namespace plumb::rpc
