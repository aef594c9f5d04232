// The store's spdlog logger ("store") and a limiter for repeated notices.
//
// store_logger() returns the logger registered under "store" when the daemon
// has set one up (with its sinks), else an unregistered clone of spdlog's
// default logger, so the daemon can still register "store" later.
// Thread-safety: store_logger() is safe from any thread; RateLimit is not.
#pragma once

#include <cstdint>
#include <memory>

namespace spdlog {
class logger;
}

namespace tarn::store {

std::shared_ptr<spdlog::logger> store_logger();

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
