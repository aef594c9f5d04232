// A limiter for repeated store notices; the store logs to os::logger("store").
// Thread-safety: RateLimit is not thread-safe.
#pragma once

#include <cstdint>

#include "drivers/os/logging.h"

namespace tarn::store {

// Lets a repeated condition through at most once per `interval_s` of the
// caller's clock (UTC seconds passed in, so tests need no real time).
class RateLimit {
 public:
  explicit RateLimit(std::int64_t interval_s = 3600) : interval_s_(interval_s) {}
  // True the first time and then whenever `interval_s` has passed since the last true.
  bool due(std::int64_t now);

 private:
  std::int64_t interval_s_;
  std::int64_t last_ = 0;
  bool fired_ = false;
};

}  // namespace tarn::store
