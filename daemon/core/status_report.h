// StatusReport: what the station says about itself: the status JSON of the
// control socket's "status" (daemon/cli/cmd_status.cpp prints it) and the
// one line for systemd's STATUS=. Reads the parts through their const
// accessors only; changes nothing. The outbox counts, the store's size and
// the sparklines are queries on the store's files.
// Owns: nothing.
// Called by: Station::status() and Station::status_line().
// Thread-safety: io_context thread only (like the parts it reads).
#pragma once

#include <string>

#include "daemon/core/station_context.h"

namespace tarn::daemon {

class BusLines;
class PacketQueue;
class OutboxDrain;
class LinkControl;
class ShoreCommands;
class MaintenanceControl;
class ClockWatch;
class HealthReporter;

class StatusReport {
 public:
  struct Parts {
    const StationContext& ctx;
    const BusLines& lines;
    const PacketQueue& packets;
    const OutboxDrain& drain;
    const LinkControl& link;
    const ShoreCommands& shore;
    const MaintenanceControl& maintenance;
    const ClockWatch& clock_watch;
    const HealthReporter& health;
  };
  explicit StatusReport(Parts parts) : p_(parts) {}

  Json status() const;
  // "<online>/<total> instruments online, link <state>, <n> unsent".
  std::string line() const;

 private:
  Json instruments() const;
  Json channels() const;
  Json alerts() const;
  void add_maintenance(Json& s) const;
  Json store() const;
  Json link() const;
  Parts p_;
};

}  // namespace tarn::daemon
