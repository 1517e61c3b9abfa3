// Status and Result: how every fallible sprig call reports failure.
//
// No exception crosses the public API. A call that can fail returns a Status (or a Result<T>,
// which holds either a value or a non-OK Status). The message is one sentence meant for a
// person: it names the file, field or tensor concerned and what was expected.
//
// Status and Result are plain values: copyable, movable, and safe to use from any thread.
#pragma once

#include <cassert>
#include <optional>
#include <string>
#include <utility>

namespace sprig {

class Status {
 public:
  enum class Code {
    kOk = 0,
    kInvalidArgument,  // the caller's input is malformed or inconsistent
    kNotFound,         // a file, tensor or field that must exist does not
    kCorruption,       // a file's bytes do not match what its format promises
    kIOError,          // the operating system refused a read, write, map or rename
    kNotSupported,     // well-formed, but asks for something this build cannot do
    kCheckFailed,      // a verification ran and found a mismatch
  };

  Status() = default;
  static Status Ok() { return Status(); }
  static Status InvalidArgument(std::string m) {
    return Status(Code::kInvalidArgument, std::move(m));
  }
  static Status NotFound(std::string m) { return Status(Code::kNotFound, std::move(m)); }
  static Status Corruption(std::string m) { return Status(Code::kCorruption, std::move(m)); }
  static Status IOError(std::string m) { return Status(Code::kIOError, std::move(m)); }
  static Status NotSupported(std::string m) { return Status(Code::kNotSupported, std::move(m)); }
  static Status CheckFailed(std::string m) { return Status(Code::kCheckFailed, std::move(m)); }

  bool ok() const { return code_ == Code::kOk; }
  Code code() const { return code_; }
  const std::string& message() const { return message_; }

  // Returns a copy whose message is "<prefix>: <message>", keeping the code.
  Status WithContext(const std::string& prefix) const {
    if (ok()) return *this;
    return Status(code_, prefix + ": " + message_);
  }

 private:
  Status(Code code, std::string message) : code_(code), message_(std::move(message)) {}
  Code code_ = Code::kOk;
  std::string message_;
};

// Either a T or the Status that explains why there is none.
template <typename T>
class Result {
 public:
  Result(T value) : value_(std::move(value)) {}  // NOLINT: implicit by design
  Result(Status status) : status_(std::move(status)) { assert(!status_.ok()); }  // NOLINT

  bool ok() const { return value_.has_value(); }
  const Status& status() const { return status_; }
  T& value() & { return *value_; }
  const T& value() const& { return *value_; }
  T&& value() && { return std::move(*value_); }
  T* operator->() { return &*value_; }
  const T* operator->() const { return &*value_; }
  T& operator*() & { return *value_; }
  const T& operator*() const& { return *value_; }

 private:
  std::optional<T> value_;
  Status status_;
};

}  // namespace sprig
