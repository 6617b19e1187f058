// One error style for the daemon: a Status says whether something worked and, if not, what
// kind of failure it was and a message for a person (naming the line, field or key concerned).
// Result<T> carries a value or a failed Status. Both are [[nodiscard]]: a result cannot be
// dropped by accident. The kinds are domain words; the API maps them to HTTP in one function
// (api/api.cpp, HttpStatusOf) and nowhere else does a status code exist.
#pragma once

#include <optional>
#include <string>
#include <utility>

namespace forewarden {

enum class ErrorKind {
  kInvalid,      // the input is wrong: a field, a value, a line
  kNotFound,     // no such series, alert or endpoint
  kConflict,     // the request is well formed but the current state forbids it
  kBusy,         // the engine queue is full: retry later
  kStoreFailed,  // the database failed; nothing was applied
  kForbidden,    // the caller may not do this
  kIo,           // the operating system refused: a socket, a file, a folder
  kInternal,     // a defect of ours: logged and counted
};

class [[nodiscard]] Status {
 public:
  Status() = default;  // success
  Status(ErrorKind kind, std::string message)
      : failed_(true), kind_(kind), message_(std::move(message)) {}

  static Status Ok() { return {}; }
  static Status Invalid(std::string m) { return {ErrorKind::kInvalid, std::move(m)}; }
  static Status NotFound(std::string m) { return {ErrorKind::kNotFound, std::move(m)}; }
  static Status Conflict(std::string m) { return {ErrorKind::kConflict, std::move(m)}; }
  static Status Busy(std::string m) { return {ErrorKind::kBusy, std::move(m)}; }
  static Status StoreFailed(std::string m) { return {ErrorKind::kStoreFailed, std::move(m)}; }
  static Status Io(std::string m) { return {ErrorKind::kIo, std::move(m)}; }

  bool ok() const { return !failed_; }
  explicit operator bool() const { return ok(); }
  ErrorKind kind() const { return kind_; }
  const std::string& message() const { return message_; }
  // Prefixes the message with where it happened ("field k: ...").
  Status& Prefix(const std::string& where) {
    if (failed_) message_ = where + message_;
    return *this;
  }

 private:
  bool failed_ = false;
  ErrorKind kind_ = ErrorKind::kInternal;
  std::string message_;
};

template <typename T>
class [[nodiscard]] Result {
 public:
  Result(T value) : value_(std::move(value)) {}          // NOLINT(google-explicit-constructor)
  Result(Status status) : status_(std::move(status)) {}  // NOLINT(google-explicit-constructor)

  bool ok() const { return value_.has_value(); }
  explicit operator bool() const { return ok(); }
  const Status& status() const { return status_; }
  T& value() & { return *value_; }
  const T& value() const& { return *value_; }
  T&& value() && { return std::move(*value_); }
  T* operator->() { return &*value_; }
  const T* operator->() const { return &*value_; }
  T& operator*() { return *value_; }
  const T& operator*() const { return *value_; }

 private:
  std::optional<T> value_;
  Status status_;
};

// The message of the engine's full queue, in one place.
inline Status EngineBusy() {
  return Status::Busy("the engine is busy; retry later");
}

}  // namespace forewarden
