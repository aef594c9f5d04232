// Station health: what the board itself says, asked of the os::Env (the
// kernel on a station, the test's figures in unit tests). Board temperature
// (thermal zone or hwmon file), free disk under the state directory, load,
// uptime, supply voltage where the config names a file, clock
// synchronisation (adjtimex), boot count. One reading costs a few small file
// reads; nothing here blocks.
#pragma once

#include <cstdint>
#include <optional>
#include <string>

#include <nlohmann/json.hpp>

#include "config/problems.h"
#include "config/station_config.h"
#include "drivers/os/env.h"

namespace tarn::daemon {

struct HealthOptions {
  int interval_s = 3600;                                                  // health packet period
  std::string board_temp_file = "/sys/class/thermal/thermal_zone0/temp";  // millidegrees
  std::string supply_file;      // e.g. a hwmon in*_input (millivolts)
  double supply_scale = 0.001;  // file value * scale = volts
  std::string supply_channel;   // or a channel of an instrument, in volts
  // "kernel": samples taken while adjtimex says unsynchronised carry the
  // clock_unsynced reason and their packets the header flag;
  // "assume_synchronised": for stations whose clock is trusted otherwise.
  std::string clock_sync = "kernel";
};

HealthOptions read_health_options(const config::StationConfig& cfg, config::Problems& problems);

using ClockSync = os::ClockSync;
const char* to_string(ClockSync s);
// The kernel's view (adjtimex(2): STA_UNSYNC and the maximum error).
ClockSync kernel_clock_sync(os::Env& env);

struct HealthReading {
  std::optional<double> board_temp_c;
  std::optional<std::uint64_t> disk_free_mib, disk_total_mib;
  std::optional<double> load1;
  std::optional<std::int64_t> uptime_s;
  std::optional<double> supply_v;
  ClockSync clock = ClockSync::unknown;
  std::int64_t boot_count = 0;
  nlohmann::json to_json() const;
};

// Reads everything but the supply channel (which the station fills in).
HealthReading read_health(os::Env& env, const HealthOptions& o, const std::string& state_dir);

}  // namespace tarn::daemon
