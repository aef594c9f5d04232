// Calibration of one channel: raw instrument value -> physical units.
// Config block (per channel, optional): {"kind": "linear", "gain": 1, "offset": 0}
// Kinds: see calibration_config.cpp and the README's config reference.
#pragma once

#include <functional>
#include <optional>

#include "config/problems.h"
#include "config/station_config.h"

namespace tarn::drivers {

using CalibrationFn = std::function<std::optional<double>(double)>;

void validate_calibration(const config::Channel& ch, config::Problems& problems);
// REQUIRES: validate_calibration() found no problems. Identity when absent.
CalibrationFn make_calibration(const config::Channel& ch);

}  // namespace tarn::drivers
