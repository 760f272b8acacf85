#include "core/status.h"

namespace plumb {

std::string_view CodeName(Status::Code code) {
  switch (code) {
    case Status::Code::kOk: return "ok";
    case Status::Code::kNotFound: return "not found";
    case Status::Code::kInvalidArgument: return "invalid argument";
    case Status::Code::kCorruption: return "corruption";
    case Status::Code::kIoError: return "io error";
    case Status::Code::kFailedPrecondition: return "failed precondition";
    case Status::Code::kResourceExhausted: return "resource exhausted";
    case Status::Code::kUnavailable: return "unavailable";
    case Status::Code::kAborted: return "aborted";
  }
  return "unknown";
}

std::string Status::ToString() const {
  if (ok()) return "ok";
  std::string out(CodeName(code_));
  out += ": ";
  out += message_;
  return out;
}

}  // namespace plumb
