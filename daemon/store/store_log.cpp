#include "daemon/store/store_log.h"

#include <spdlog/spdlog.h>

namespace tarn::store {

std::shared_ptr<spdlog::logger> store_logger() {
  if (auto registered = spdlog::get("store")) return registered;
  static std::shared_ptr<spdlog::logger> fallback = spdlog::default_logger()->clone("store");
  return fallback;
}

bool RateLimit::due(std::int64_t now) {
  if (fired_ && now - last_ < interval_s_ && now >= last_) return false;
  fired_ = true;
  last_ = now;
  return true;
}

}  // namespace tarn::store
