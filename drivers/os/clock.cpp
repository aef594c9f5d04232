#include "drivers/os/clock.h"

#include <cmath>

namespace tarn::os {

using namespace std::chrono;

SystemClock::SystemClock(double speed, std::optional<std::int64_t> origin_ms)
    : speed_(speed > 0 ? speed : 1.0),
      origin_ms_(origin_ms),
      wall0_ms_(duration_cast<milliseconds>(system_clock::now().time_since_epoch()).count()),
      steady0_(steady_clock::now()) {}

std::int64_t SystemClock::steady_ms() const {
  auto real = duration_cast<microseconds>(steady_clock::now() - steady0_).count();
  return static_cast<std::int64_t>(std::llround(double(real) * speed_ / 1000.0));
}

std::int64_t SystemClock::wall_ms() const {
  if (origin_ms_) {
    auto sys = duration_cast<microseconds>(system_clock::now().time_since_epoch()).count();
    double d = (double(sys) / 1000.0 - double(*origin_ms_)) * speed_;
    return *origin_ms_ + static_cast<std::int64_t>(std::llround(d)) + offset_ms_;
  }
  if (speed_ == 1.0)
    return duration_cast<milliseconds>(system_clock::now().time_since_epoch()).count() + offset_ms_;
  return wall0_ms_ + steady_ms() + offset_ms_;
}

milliseconds SystemClock::real_delay_until(std::int64_t t_ms) const {
  std::int64_t d = t_ms - wall_ms();
  return d <= 0 ? milliseconds(0) : real_duration(d);
}

milliseconds SystemClock::real_duration(std::int64_t station_ms) const {
  return milliseconds(static_cast<std::int64_t>(std::ceil(double(station_ms) / speed_)));
}

}  // namespace tarn::os
