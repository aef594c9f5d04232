// ClockWatch: watches the system clock for the station. Each check reads the
// kernel's synchronisation state (when the config asks for it) and compares
// how far wall time and monotonic time moved since the last check: a
// difference beyond the limit is a clock step, logged and counted.
// Owns: the last synchronisation state, the step count and the time of the
// last step.
// Called by: Station (at start and each tick); BusLines reads sync() to mark
// samples clock_unsynced; HealthReporter and StatusReport read it.
// Thread-safety: io_context thread only.
#pragma once

#include <cstdint>
#include <string>

#include "daemon/core/health.h"
#include "drivers/os/env.h"

namespace tarn::daemon {

class ClockWatch {
 public:
  explicit ClockWatch(os::Env& clock) : clock_(clock) {}

  // sync_mode: HealthOptions::clock_sync ("kernel" asks adjtimex).
  void check(const std::string& sync_mode);

  ClockSync sync() const { return sync_; }
  std::uint64_t steps() const { return steps_; }
  const std::string& last_step() const { return last_step_; }  // UTC text, empty if none

 private:
  os::Env& clock_;
  ClockSync sync_ = ClockSync::unknown;
  std::int64_t last_wall_ms_ = 0, last_steady_ms_ = 0;
  std::uint64_t steps_ = 0;
  std::string last_step_;
};

}  // namespace tarn::daemon
