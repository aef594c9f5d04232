// Error values of the codec. Failure is expected (corrupt packets, bad input),
// so every fallible function returns Expected<T> instead of throwing.
// Thread-safety: plain values.
#pragma once

#include <optional>
#include <string>
#include <utility>

namespace tarn::codec {

enum class Errc {
  invalid_input,      // the caller's windows/manifest break a REQUIRES of the encoder
  too_large,          // does not fit the MTU even after splitting
  truncated,          // packet shorter than its fields claim
  bad_crc,            // integrity check failed
  bad_version,        // format version this decoder does not know
  manifest_mismatch,  // packet's manifest hash differs from the manifest given
  malformed,          // a field holds a value the format forbids
};

struct Error {
  Errc code = Errc::malformed;
  std::string message;  // one line: what is wrong and where
};

// A value or an Error. Minimal stand-in for C++23 std::expected.
template <class T>
class Expected {
 public:
  Expected(T value) : value_(std::move(value)) {}      // NOLINT: implicit by design
  Expected(Error error) : error_(std::move(error)) {}  // NOLINT
  bool ok() const { return value_.has_value(); }
  explicit operator bool() const { return ok(); }
  // REQUIRES: ok().
  T& value() & { return *value_; }
  const T& value() const& { return *value_; }
  // On a temporary, by value: `for (auto& x : *f())` then owns what it iterates.
  T value() && { return std::move(*value_); }
  T* operator->() { return &*value_; }
  const T* operator->() const { return &*value_; }
  T& operator*() & { return *value_; }
  const T& operator*() const& { return *value_; }
  T operator*() && { return std::move(*value_); }
  // REQUIRES: !ok().
  const Error& error() const { return error_; }

 private:
  std::optional<T> value_;
  Error error_;
};

struct Ok {};

inline Error make_error(Errc code, std::string message) {
  return Error{code, std::move(message)};
}

}  // namespace tarn::codec
