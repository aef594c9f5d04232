#include "daemon/core/clock_watch.h"

#include <algorithm>

#include "drivers/os/utc_text.h"
#include "drivers/os/logging.h"

namespace tarn::daemon {

void ClockWatch::check(const std::string& sync_mode) {
  auto log = os::logger("clock");
  ClockSync now = sync_mode == "kernel" ? kernel_clock_sync(clock_) : ClockSync::synchronised;
  if (now != sync_) {
    if (now == ClockSync::unsynchronised)
      log->warn("system clock is not synchronised (adjtimex); samples are marked clock_unsynced");
    else
      log->info("system clock {}", to_string(now));
    sync_ = now;
  }
  // A step: wall time moved differently from monotonic time by more than 2 s,
  // or, at a test --speed, by more than a quarter real second of station time
  // (the two clocks are read one after the other: a thread preempted between
  // the reads at x120 would otherwise show a false step).
  std::int64_t w = clock_.wall_ms(), st = clock_.steady_ms();
  const std::int64_t limit = std::max<std::int64_t>(2000, std::int64_t(250 * clock_.speed()));
  if (last_wall_ms_) {
    std::int64_t drift = (w - last_wall_ms_) - (st - last_steady_ms_);
    if (drift > limit || drift < -limit) {
      steps_++;
      last_step_ = os::format_utc(w / 1000);
      log->warn(
          "clock stepped {} by {} s at {}; windows already closed are never reopened or "
          "sent again, samples older than the last one are dropped and counted",
          drift > 0 ? "forward" : "backward", (drift > 0 ? drift : -drift) / 1000, last_step_);
    }
  }
  last_wall_ms_ = w;
  last_steady_ms_ = st;
}

}  // namespace tarn::daemon
