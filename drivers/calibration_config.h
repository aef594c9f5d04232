// Calibration of one channel: raw instrument value -> physical units.
// The config block (per channel, optional; absent means identity) maps onto
// the variants of drivers/protocol/calibration.h:
//
//   {"kind": "linear", "gain": 1, "offset": 0}
//   {"kind": "polynomial", "coefficients": [c0, c1, c2, ...]}        (1..8 terms)
//   {"kind": "counts", "dark_counts": 50, "scale_factor": 0.0121}    (fluorometer)
//   {"kind": "steinhart_hart", "a": 1.032e-3, "b": 2.387e-4, "c": 1.58e-7}
//   {"kind": "callendar_van_dusen", "r0": 100, "a": 3.9083e-3, "b": -5.775e-7,
//    "c": -4.183e-12}                              (a, b, c default to IEC 60751)
//
// Every block is checked with ObjectReader (unknown keys, types, ranges) and
// with protocol::calibration::check (e.g. an empty polynomial).
// Thread-safety: pure functions.
#pragma once

#include <optional>
#include <string>
#include <vector>

#include "config/problems.h"
#include "config/station_config.h"
#include "drivers/protocol/calibration.h"

namespace tarn::drivers {

using Calibration = protocol::calibration::Calibration;

// Reads `block` (null: identity). Problems are recorded at `pointer`.
Calibration read_calibration(const config::Json& block, const std::string& pointer,
                             config::Problems& problems);

// The calibrations of an instrument's channels, in channel order, as
// check_instruments() (driver.h) read them; kept in Instrument::settings.
struct ChannelCalibrations {
  std::vector<Calibration> channels;
};
// REQUIRES: check_instruments() ran on `in` without problems (throws
// std::logic_error otherwise). Identity for a channel without calibration.
const std::vector<Calibration>& calibrations_of(const config::Instrument& in);

// A short description for `tarn probe`, e.g. "counts (dark 50, x 0.0121)".
std::string describe(const Calibration& cal);

}  // namespace tarn::drivers
