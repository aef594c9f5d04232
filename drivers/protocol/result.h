// Result<T, E>: a value or an error value, for operations where failure is
// expected (parse errors, out-of-range inputs). C++20 has no std::expected.
//
//   Result<int, ParseError> r = parse(...);
//   if (!r) return r.error();
//   use(r.value());
//
// REQUIRES: value() only when ok(), error() only when !ok(); breaking that is a
// programming error and throws std::logic_error.
// Thread-safety: a plain value type.
#pragma once

#include <stdexcept>
#include <utility>
#include <variant>

namespace tarn::protocol {

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
  Result(T value) : v_(std::in_place_index<0>, std::move(value)) {}
  Result(Failure<E> f) : v_(std::in_place_index<1>, std::move(f.error)) {}

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
  T&& value() && {
    if (!ok()) throw std::logic_error("Result::value() called on an error");
    return std::get<0>(std::move(v_));
  }
  const E& error() const {
    if (ok()) throw std::logic_error("Result::error() called on a value");
    return std::get<1>(v_);
  }
  const T* operator->() const { return &value(); }
  const T& operator*() const& { return value(); }

 private:
  std::variant<T, E> v_;
};

}  // namespace tarn::protocol
