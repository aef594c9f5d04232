#include "daemon/store/store_log.h"

namespace tarn::store {

bool RateLimit::due(std::int64_t now) {
  if (fired_ && now - last_ < interval_s_ && now >= last_) return false;
  fired_ = true;
  last_ = now;
  return true;
}

}  // namespace tarn::store
