// Status: the outcome of an operation that can fail, as in LevelDB. Errors cross module
// boundaries as a Status, never as an exception. A Status is cheap to copy when OK.
#pragma once

#include <string>
#include <string_view>
#include <utility>

namespace plumb {

// [[nodiscard]]: a call whose Status is dropped does not compile (-Werror). Where ignoring an
// error is truly right, say why in a comment and call IgnoreError() on it.
class [[nodiscard]] Status {
 public:
  enum class Code {
    kOk = 0,
    kNotFound,
    kInvalidArgument,
    kCorruption,  // stored data is unreadable or inconsistent
    kIoError,     // the disk or the database refused an operation
    kFailedPrecondition,
    kResourceExhausted,
    kUnavailable,
    kAborted,
  };

  Status() = default;
  static Status Ok() { return Status(); }
  static Status NotFound(std::string msg) { return Status(Code::kNotFound, std::move(msg)); }
  static Status InvalidArgument(std::string msg) {
    return Status(Code::kInvalidArgument, std::move(msg));
  }
  static Status Corruption(std::string msg) { return Status(Code::kCorruption, std::move(msg)); }
  static Status IoError(std::string msg) { return Status(Code::kIoError, std::move(msg)); }
  static Status FailedPrecondition(std::string msg) {
    return Status(Code::kFailedPrecondition, std::move(msg));
  }
  static Status ResourceExhausted(std::string msg) {
    return Status(Code::kResourceExhausted, std::move(msg));
  }
  static Status Unavailable(std::string msg) { return Status(Code::kUnavailable, std::move(msg)); }
  static Status Aborted(std::string msg) { return Status(Code::kAborted, std::move(msg)); }

  bool ok() const { return code_ == Code::kOk; }
  bool IsNotFound() const { return code_ == Code::kNotFound; }
  bool IsCorruption() const { return code_ == Code::kCorruption; }
  Code code() const { return code_; }
  const std::string& message() const { return message_; }

  // "ok" or "<code name>: <message>".
  std::string ToString() const;

  // Drops this Status on purpose. The caller's comment says why the error does not matter
  // there (e.g. logged and counted elsewhere, or a best-effort clean-up).
  void IgnoreError() const {}

 private:
  Status(Code code, std::string msg) : code_(code), message_(std::move(msg)) {}
  Code code_ = Code::kOk;
  std::string message_;
};

std::string_view CodeName(Status::Code code);

}  // namespace plumb

// Returns early from the enclosing function when `expr` yields a non-OK Status.
#define PLUMB_RETURN_IF_ERROR(expr)                \
  do {                                             \
    ::plumb::Status plumb_status_ = (expr);        \
    if (!plumb_status_.ok()) return plumb_status_; \
  } while (0)
