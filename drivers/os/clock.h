// Clock: the one place the daemon reads time. Wall time is UTC milliseconds
// since the Unix epoch; steady time is monotonic milliseconds. A speed factor
// N > 1 makes both run N times faster from construction (`tarn run --speed N`),
// so hours of station time pass in minutes for the demo and the tests.
// Instrument I/O timeouts are NOT scaled: instruments answer in real time.
// Thread-safety: const methods are safe from any thread.
#pragma once

#include <chrono>
#include <cstdint>
#include <optional>

namespace tarn::os {

class Clock {
 public:
  virtual ~Clock() = default;
  virtual std::int64_t wall_ms() const = 0;
  virtual std::int64_t steady_ms() const = 0;
  // Real duration to wait until wall time `t_ms` is reached (0 if past).
  virtual std::chrono::milliseconds real_delay_until(std::int64_t t_ms) const = 0;
  // Converts a span of station time into real time.
  virtual std::chrono::milliseconds real_duration(std::int64_t station_ms) const = 0;
  virtual double speed() const = 0;
};

// The system clock, optionally sped up.
class SystemClock final : public Clock {
 public:
  // With `origin_ms`, station time is origin + (system time - origin) * speed:
  // the same timeline for every process given the same origin, also across
  // restarts (the power-cut tests restart the daemon at --speed).
  explicit SystemClock(double speed = 1.0, std::optional<std::int64_t> origin_ms = std::nullopt);
  std::int64_t wall_ms() const override;
  std::int64_t steady_ms() const override;
  std::chrono::milliseconds real_delay_until(std::int64_t t_ms) const override;
  std::chrono::milliseconds real_duration(std::int64_t station_ms) const override;
  double speed() const override { return speed_; }
  // Shifts wall time by `delta_ms` (tests: a simulated clock step).
  void step(std::int64_t delta_ms) { offset_ms_ += delta_ms; }

 private:
  double speed_;
  std::optional<std::int64_t> origin_ms_;
  std::int64_t wall0_ms_;
  std::chrono::steady_clock::time_point steady0_;
  std::int64_t offset_ms_ = 0;
};

}  // namespace tarn::os
