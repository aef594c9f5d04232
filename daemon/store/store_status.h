// Error values of the station store. Failure is expected here (full disks,
// read-only remounts, damaged files), so every store operation returns a
// Status or a Result<T> instead of throwing.
//
// Thread-safety: plain values.
#pragma once

#include <string>
#include <string_view>
#include <utility>

namespace tarn::store {

enum class StoreErrc {
  ok = 0,
  disk_full,    // SQLITE_FULL, ENOSPC, EDQUOT: retry when space returns
  read_only,    // SQLITE_READONLY, EROFS: retry when the file system is writable again
  busy,         // another connection holds the lock beyond the busy timeout
  damaged,      // not a database, truncated, integrity check failed
  io,           // any other I/O error from SQLite or the OS
  not_found,    // the requested row or file does not exist
  invalid,      // the caller passed something the contract does not allow
  no_sequence,  // no durably reserved sequence number could be had (sidecar not writable)
};

// "disk_full", "read_only", ...
std::string_view errc_name(StoreErrc c);

// True for the conditions the holding queues wait out (space or write access may return).
constexpr bool is_transient(StoreErrc c) {
  return c == StoreErrc::disk_full || c == StoreErrc::read_only || c == StoreErrc::busy ||
         c == StoreErrc::io || c == StoreErrc::no_sequence;
}

class Status {
 public:
  Status() = default;
  Status(StoreErrc code, std::string message) : code_(code), message_(std::move(message)) {}
  static Status success() { return {}; }

  bool ok() const { return code_ == StoreErrc::ok; }
  StoreErrc code() const { return code_; }
  const std::string& message() const { return message_; }
  // One line: "disk_full: outbox.db: insert packet: database or disk is full".
  std::string describe() const;

 private:
  StoreErrc code_ = StoreErrc::ok;
  std::string message_;
};

// A value or the Status saying why there is none. T must be default-constructible.
template <class T>
class Result {
 public:
  Result(T value) : value_(std::move(value)) {}          // NOLINT: implicit by design
  Result(Status status) : status_(std::move(status)) {}  // NOLINT
  bool ok() const { return status_.ok(); }
  const Status& status() const { return status_; }
  // REQUIRES: ok().
  T& value() & { return value_; }
  const T& value() const& { return value_; }
  T&& value() && { return std::move(value_); }
  T* operator->() { return &value_; }
  const T* operator->() const { return &value_; }

 private:
  Status status_;
  T value_{};
};

}  // namespace tarn::store
