// Result<T, E>: a value or an error value, the one result type of the station
// (the codec, the protocol parsers, the store). Failure is expected there
// (corrupt packets, parse errors, full disks), so fallible functions return a
// Result instead of throwing. C++20 has no std::expected.
//
//   Result<int, ParseError> r = parse(...);
//   if (!r) return fail(r.error());
//   use(r.value());
//
// An error converts implicitly when E and T are unrelated types; `fail(e)`
// makes the error side explicitly (needed when they are not).
// REQUIRES: value() only when ok(), error() only when !ok(); breaking that is a
// programming error and throws std::logic_error.
// Thread-safety: a plain value type.
//
// Also here: the codec's error value (codec::Error, codec::Result<T>).
#pragma once

#include <stdexcept>
#include <string>
#include <type_traits>
#include <utility>
#include <variant>

namespace tarn {

template <class E>
struct Failure {
  E error;
};

// Makes the error side of a Result: `return fail(ParseError::truncated);`
template <class E>
constexpr Failure<E> fail(E e) {
  return Failure<E>{std::move(e)};
}

template <class T, class E>
class Result {
 public:
  Result(T value) : v_(std::in_place_index<0>, std::move(value)) {}  // NOLINT: implicit by design
  Result(Failure<E> f) : v_(std::in_place_index<1>, std::move(f.error)) {}  // NOLINT
  Result(E error)  // NOLINT: implicit by design
      requires(!std::is_convertible_v<E, T> && !std::is_convertible_v<T, E>)
      : v_(std::in_place_index<1>, std::move(error)) {}

  bool ok() const { return v_.index() == 0; }
  explicit operator bool() const { return ok(); }

  const T& value() const& {
    if (!ok()) throw std::logic_error("Result::value() called on an error");
    return std::get<0>(v_);
  }
  T& value() & {
    if (!ok()) throw std::logic_error("Result::value() called on an error");
    return std::get<0>(v_);
  }
  // On a temporary, by value: `for (auto& x : *f())` then owns what it iterates.
  T value() && {
    if (!ok()) throw std::logic_error("Result::value() called on an error");
    return std::get<0>(std::move(v_));
  }
  const E& error() const {
    if (ok()) throw std::logic_error("Result::error() called on a value");
    return std::get<1>(v_);
  }
  T* operator->() { return &value(); }
  const T* operator->() const { return &value(); }
  T& operator*() & { return value(); }
  const T& operator*() const& { return value(); }
  T operator*() && { return std::move(*this).value(); }

 private:
  std::variant<T, E> v_;
};

}  // namespace tarn

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

// What the codec's fallible functions return.
template <class T>
using Result = tarn::Result<T, Error>;

struct Ok {};

inline Error make_error(Errc code, std::string message) {
  return Error{code, std::move(message)};
}

}  // namespace tarn::codec
