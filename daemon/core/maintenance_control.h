// MaintenanceControl: runs the station's maintenance periods
// (daemon/core/maintenance_book.h holds the rules). Starts and ends periods
// on request (control socket, downlink), keeps them as rows of the archive's
// maintenance table, puts the covered instruments' channels in maintenance
// in the pipeline (their samples are flagged fail), ends each period by
// itself at its maximum duration, and at start restores the open periods
// from the archive.
// Owns: the MaintenanceBook, the maintenance options and the timer that
// ends the next period.
// Called by: Station (start, tick, reload, stop, its maintenance() for the
// control socket), ShoreCommands (the downlink's maintenance command);
// StatusReport reads book().
// Thread-safety: io_context thread only.
#pragma once

#include <string>
#include <vector>

#include "config/downlink_command.h"
#include "daemon/core/maintenance_book.h"
#include "daemon/core/station_context.h"

namespace tarn::daemon {

class MaintenanceControl {
 public:
  explicit MaintenanceControl(StationContext& ctx) : ctx_(ctx) {}

  // Starts or ends a period. Returns an error in words, empty on success;
  // `data` gets what was started or ended; `via` is said in the log.
  std::string request(const config::MaintenanceArgs& a, const std::string& via, Json& data);
  // The options from ctx.cfg (start).
  void read_options();
  // The archive's open periods become the open periods (start).
  void restore();
  // Ends the periods whose maximum duration ran out (tick, timer).
  void expire();
  // A new config: new options for the next periods; an instrument it
  // dropped ends its period.
  void reload();
  void cancel_timer() { timer_.cancel(); }

  const MaintenanceBook& book() const { return book_; }

 private:
  void apply();
  void record_ended(const std::vector<MaintenanceEntry>& ended);
  void schedule_end();

  StationContext& ctx_;
  MaintenanceBook book_;
  MaintenanceOptions opts_;
  os::Timer timer_;  // station time: the next period to end by itself
};

}  // namespace tarn::daemon
