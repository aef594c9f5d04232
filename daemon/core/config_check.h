// The whole validation of a station config: the core model (config/), then
// each owner's blocks: drivers (options, sources, calibrations), the uplink
// backend, the link policy and the downlink key. Never opens a port or a socket.
//
// Parsed once: what each reader read is kept with the config, typed, for the
// code that runs: Channel::pipeline and StationConfig::alert_rules (the
// pipeline), and in StationConfig::settings (config/owner_settings.h):
// daemon::HealthOptions, daemon::MaintenanceOptions,
// uplink::LinkPolicyConfig, store::StationStoreOptions; and in each
// Instrument::settings what its driver read (drivers/driver.h).
#pragma once

#include <string>

#include "config/station_config.h"

namespace tarn::daemon {

config::LoadResult load_and_check(const std::string& path);
// The same for config text (downlink overrides applied onto the file's JSON).
config::LoadResult load_and_check_text(const std::string& text, const std::string& file);

}  // namespace tarn::daemon
