// The whole validation of a station config: the core model (config/), then
// each owner's blocks: drivers (options, sources, calibrations) and the
// uplink backend. Never opens a port or a socket.
#pragma once

#include <string>

#include "config/station_config.h"

namespace tarn::daemon {

config::LoadResult load_and_check(const std::string& path);

}  // namespace tarn::daemon
