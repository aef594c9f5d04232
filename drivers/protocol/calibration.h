// Per-channel calibration: raw instrument reading -> physical units.
// Plain structs (the config loader fills them from JSON) and pure functions.
//
//   Identity           y = x
//   Linear             y = gain * x + offset
//   Polynomial         y = c0 + c1 x + c2 x^2 + ... (Horner)
//   CountsToConcentration  fluorometer: y = (counts - dark_counts) * scale_factor,
//                      dark_counts from a blank (deionised water, cap on);
//                      negative results are kept, QC decides on them
//   SteinhartHart      thermistor R [ohm] -> degC: 1/T = A + B ln R + C (ln R)^3, T in K
//   CallendarVanDusen  platinum RTD R [ohm] -> degC, IEC 60751:
//                      R(t) = R0 (1 + A t + B t^2)                  for 0 <= t <= 850
//                      R(t) = R0 (1 + A t + B t^2 + C (t-100) t^3)  for -200 <= t < 0
//                      inverse: closed form at and above 0 degC, Newton below.
//
// How a driver uses it: keep one Calibration per channel and call
// apply(cal, raw); an error means "no value" for that sample (reason garbled
// or instrument status, the driver decides), never a made-up number.
// Thread-safety: all functions are pure.
#pragma once

#include <optional>
#include <string>
#include <string_view>
#include <variant>
#include <vector>

#include "codec/result.h"

namespace tarn::protocol::calibration {

struct Identity {};

struct Linear {
  double gain = 1.0;
  double offset = 0.0;
};

struct Polynomial {
  std::vector<double> coefficients;  // c0, c1, ..., cn; at least one
};

struct CountsToConcentration {
  double dark_counts = 0.0;   // instrument counts in a blank
  double scale_factor = 1.0;  // concentration per count, e.g. ug/L per count
};

struct SteinhartHart {
  double a = 0.0;
  double b = 0.0;
  double c = 0.0;
};

// IEC 60751 coefficients as defaults.
struct CallendarVanDusen {
  double r0 = 100.0;  // 100 for PT100, 1000 for PT1000
  double a = 3.9083e-3;
  double b = -5.775e-7;
  double c = -4.183e-12;  // used below 0 degC only
};

using Calibration = std::variant<Identity, Linear, Polynomial, CountsToConcentration, SteinhartHart,
                                 CallendarVanDusen>;

enum class CalError {
  not_finite,       // input or result NaN / infinite
  out_of_domain,    // R <= 0, RTD outside -200..850 degC, thermistor formula undefined
  no_convergence,   // Newton iteration did not settle (should not happen in the domain)
  bad_coefficients  // e.g. empty polynomial: caught by check() at start-up
};
std::string_view to_string(CalError e);

// Start-up validation for the config loader: the problem in one line, or nothing.
std::optional<std::string> check(const Calibration& cal);

Result<double, CalError> apply(const Calibration& cal, double raw);

// ---- the temperature conversions on their own ----

inline constexpr double cvd_min_celsius = -200.0;  // IEC 60751 range
inline constexpr double cvd_max_celsius = 850.0;

// R(t) in ohm; REQUIRES -200 <= t <= 850 (else out_of_domain).
Result<double, CalError> cvd_resistance(const CallendarVanDusen& cvd, double t_celsius);
// t(R) in degC; R outside R(-200)..R(850) is out_of_domain.
Result<double, CalError> cvd_temperature(const CallendarVanDusen& cvd, double r_ohm);

inline constexpr double kelvin_offset = 273.15;

Result<double, CalError> steinhart_hart_temperature(const SteinhartHart& sh, double r_ohm);
// The inverse, R(t), by the closed-form solution of the cubic in ln R.
Result<double, CalError> steinhart_hart_resistance(const SteinhartHart& sh, double t_celsius);

}  // namespace tarn::protocol::calibration
