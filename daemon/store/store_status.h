// Error values of the station store. Failure is expected here (full disks,
// read-only remounts, damaged files), so every store operation returns a
// Status or a Result<T> instead of throwing.
//
// Thread-safety: plain values.
#pragma once

#include <string>
#include <string_view>
#include <utility>

#include "codec/result.h"

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

// A value or the Status saying why there is none: the station's one Result
// (codec/result.h) with Status as its error.
template <class T>
using Result = tarn::Result<T, Status>;

}  // namespace tarn::store
