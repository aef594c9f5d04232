// MaintenanceBook: the station's open maintenance periods, per instrument or
// for the whole station, each with the time it ends by itself. Pure: times
// are passed in, nothing is read or written; the Station persists the
// periods in the archive (table maintenance) and applies them to the
// pipeline (WindowAssembler::set_maintenance).
//
// Rules (README "Maintenance"):
// - At most one open period per scope: the whole station ("") or one
//   instrument. Several instruments may be in maintenance at once.
// - An instrument cannot start a period while the whole station is in one
//   (that period covers it already); the whole station may start one while
//   instruments are in theirs: each keeps its own end.
// - stop without an instrument ends every open period; stop with one ends
//   that instrument's period only (not the station's).
// - Each period ends by itself at until_t = start + its maximum duration
//   (the config's `maintenance.max_duration_s`, or the start's own).
// Thread-safety: not thread-safe; the io_context thread only.
#pragma once

#include <cstdint>
#include <functional>
#include <map>
#include <optional>
#include <string>
#include <vector>

#include "config/downlink_command.h"
#include "config/json_reader.h"
#include "config/station_config.h"

namespace tarn::daemon {

struct MaintenanceOptions {
  // Default 2 h: common practice, no source (a cleaning or swap visit).
  std::int64_t max_duration_s = 7200;
};
inline constexpr std::int64_t kMaintenanceMaxDurationMinS = 60;
inline constexpr std::int64_t kMaintenanceMaxDurationMaxS = 172800;  // 2 days

// Reads the top-level "maintenance" block; problems get JSON pointers.
MaintenanceOptions read_maintenance_options(const config::StationConfig& cfg, config::Problems& p);

struct MaintenanceEntry {
  std::string instrument;  // "" = the whole station
  std::int64_t start_t = 0;
  std::int64_t until_t = 0;  // ends by itself then
  std::optional<std::int64_t> end_t;
  std::string note;
  std::string ended_by;  // "stop", "time_limit", "config" once ended
  std::optional<std::int64_t> archive_id;
};

// "the whole station" or "instrument NAME": for messages.
std::string maintenance_scope_name(const std::string& instrument);

class MaintenanceBook {
 public:
  // Checks a start or stop against the open periods and the configured
  // instruments. Returns the refusal in words (one line), empty when allowed.
  std::string check(const config::MaintenanceArgs& a,
                    const std::vector<std::string>& instruments) const;
  // REQUIRES: check() passed. max_s: the period's maximum duration.
  MaintenanceEntry& start(const config::MaintenanceArgs& a, std::int64_t t, std::int64_t max_s);
  // REQUIRES: check() passed. Ends the instrument's period, or every period.
  std::vector<MaintenanceEntry> stop(const std::string& instrument, std::int64_t t);
  // Ends the periods whose until_t <= now; each ends at `now`, or at its
  // until_t when `at_until` (the daemon was not running when it ran out).
  std::vector<MaintenanceEntry> expire(std::int64_t now, bool at_until);
  // Ends the periods of instruments no longer configured (a reload).
  std::vector<MaintenanceEntry> drop_unknown(const std::vector<std::string>& instruments,
                                             std::int64_t t);
  // Takes an open period back (a restart: read from the archive).
  void restore(MaintenanceEntry e);
  void clear() { open_.clear(); }

  std::optional<std::int64_t> next_until() const;
  bool any() const { return !open_.empty(); }
  // Is the instrument covered (its own period or the whole station's)?
  bool covers(const std::string& instrument) const {
    return open_.count("") || open_.count(instrument);
  }
  const std::map<std::string, MaintenanceEntry>& open() const { return open_; }
  const std::optional<MaintenanceEntry>& last_ended() const { return last_ended_; }
  void set_last_ended(MaintenanceEntry e) { last_ended_ = std::move(e); }

 private:
  std::vector<MaintenanceEntry> end_if(std::int64_t t, const std::string& by, bool at_until,
                                       const std::function<bool(const MaintenanceEntry&)>& pred);
  std::map<std::string, MaintenanceEntry> open_;  // by scope ("" = station)
  std::optional<MaintenanceEntry> last_ended_;
};

}  // namespace tarn::daemon
