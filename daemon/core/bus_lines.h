// BusLines: the station's serial lines, one drivers::BusScheduler per line
// with the instruments the config puts on it. Each poll's readings go into
// the pipeline (with the driver's problem as a reason, and clock_unsynced
// while the clock is not synchronised) and the output to SampleIntake. A
// reload retires the running schedulers: the new ones start once the old
// ones let go of their ports. Every 10 minutes of station time one summary
// line per instrument is logged.
// Owns: the schedulers (running and retired), the channel index per line
// member, the slot of each instrument's last poll, the retire and summary
// timers.
// Called by: Station (build, retire, start, stop); StatusReport reads lines().
// Thread-safety: io_context thread only; the schedulers call back there.
#pragma once

#include <cstddef>
#include <cstdint>
#include <map>
#include <memory>
#include <string>
#include <vector>

#include "daemon/core/station_context.h"
#include "drivers/bus_scheduler.h"

namespace tarn::daemon {

class SampleIntake;
class ClockWatch;

class BusLines {
 public:
  BusLines(StationContext& ctx, SampleIntake& intake, const ClockWatch& clock_watch);

  // A scheduler per line of ctx.cfg (not started); first_of_instrument:
  // each instrument's first channel.
  void build(const std::map<std::string, std::size_t>& first_of_instrument);
  // Stops the schedulers and keeps them until their exchange in progress ended.
  void retire();
  // Starts the schedulers now, or once the retired ones let go of their ports.
  void start();
  // Stops polling (an orderly stop); the schedulers stay until retire().
  void stop();
  void log_summaries();
  void cancel_summaries() { summary_timer_.cancel(); }

  // Per line, its scheduler (null for a line without instruments).
  const std::vector<std::unique_ptr<drivers::BusScheduler>>& lines() const { return lines_; }

 private:
  void reap_retired();
  void on_poll(std::size_t line, std::size_t instrument, const drivers::PollResult& r);

  StationContext& ctx_;
  SampleIntake& intake_;
  const ClockWatch& clock_watch_;
  std::vector<std::unique_ptr<drivers::BusScheduler>> lines_;
  // Stopped schedulers whose exchange in progress has not finished yet (a
  // reload): destroyed once idle, never under a suspended poll.
  std::vector<std::unique_ptr<drivers::BusScheduler>> retired_;
  bool waiting_ = false;                                 // start() waits for the retired ones
  std::vector<std::vector<std::size_t>> channel_index_;  // [line][member] -> first channel
  // Per instrument, the slot of its last poll: a reload's new schedulers fill
  // the slots in between with readings flagged missed.
  std::map<std::string, std::int64_t> last_slot_ms_;
  os::Timer retire_timer_;   // real time: looks again whether the retired ones let go
  os::Timer summary_timer_;  // station time: the next summary lines
};

}  // namespace tarn::daemon
