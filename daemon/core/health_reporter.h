// HealthReporter: the station's own health (daemon/core/health.h) on the
// wire and in the status. At start it counts board boots (a marker on the
// runtime directory, a tmpfs each boot empties) and takes a first reading;
// every health interval it reads the board again (supply voltage from a
// channel where the config names one) and queues a health packet. Also the
// status view's sparklines: hourly means of the last 6 hours per channel.
// Owns: the health options, the last reading (with the boot count) and the
// health timer.
// Called by: Station (start, reload, stop; it passes options().clock_sync
// to ClockWatch); StatusReport reads reading() and sparklines().
// Thread-safety: io_context thread only.
#pragma once

#include "daemon/core/health.h"
#include "daemon/core/station_context.h"

namespace tarn::daemon {

class PacketQueue;
class OutboxDrain;
class ClockWatch;

class HealthReporter {
 public:
  HealthReporter(StationContext& ctx, PacketQueue& packets, OutboxDrain& drain,
                 const ClockWatch& clock_watch);

  // Options, boot count and the first reading (the store is open).
  void start();
  // Every interval from now: a reading and a health packet.
  void schedule();
  void cancel() { timer_.cancel(); }
  // New options from ctx.cfg; rescheduled only for a new interval.
  void reload();

  const HealthOptions& options() const { return opts_; }
  const HealthReading& reading() const { return reading_; }
  Json sparklines() const;

 private:
  void publish();

  StationContext& ctx_;
  PacketQueue& packets_;
  OutboxDrain& drain_;
  const ClockWatch& clock_watch_;
  HealthOptions opts_;
  HealthReading reading_;
  os::Timer timer_;  // station time: the next health packet
};

}  // namespace tarn::daemon
