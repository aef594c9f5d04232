#include "drivers/protocol/calibration.h"

#include <cmath>

namespace tarn::protocol::calibration {

std::string_view to_string(CalError e) {
  switch (e) {
    case CalError::not_finite:
      return "input or result not a finite number";
    case CalError::out_of_domain:
      return "reading outside the calibration's valid range";
    case CalError::no_convergence:
      return "temperature iteration did not converge";
    case CalError::bad_coefficients:
      return "calibration coefficients unusable";
  }
  return "unknown calibration error";
}

namespace {

bool finite(double x) {
  return std::isfinite(x);
}

Result<double, CalError> finite_or_error(double y) {
  if (!finite(y)) return fail(CalError::not_finite);
  return y;
}

struct Checker {
  std::optional<std::string> operator()(const Identity&) const { return std::nullopt; }
  std::optional<std::string> operator()(const Linear& l) const {
    if (!finite(l.gain) || !finite(l.offset)) return "linear gain and offset must be finite";
    return std::nullopt;
  }
  std::optional<std::string> operator()(const Polynomial& p) const {
    if (p.coefficients.empty()) return "polynomial needs at least one coefficient (c0)";
    for (double c : p.coefficients) {
      if (!finite(c)) return "polynomial coefficients must be finite";
    }
    return std::nullopt;
  }
  std::optional<std::string> operator()(const CountsToConcentration& f) const {
    if (!finite(f.dark_counts) || !finite(f.scale_factor)) {
      return "dark counts and scale factor must be finite";
    }
    return std::nullopt;
  }
  std::optional<std::string> operator()(const SteinhartHart& s) const {
    if (!finite(s.a) || !finite(s.b) || !finite(s.c))
      return "Steinhart-Hart A, B, C must be finite";
    if (s.b == 0.0 && s.c == 0.0) return "Steinhart-Hart B and C cannot both be 0";
    return std::nullopt;
  }
  std::optional<std::string> operator()(const CallendarVanDusen& c) const {
    if (!finite(c.r0) || c.r0 <= 0.0) return "RTD R0 must be a positive number of ohms";
    if (!finite(c.a) || !finite(c.b) || !finite(c.c) || c.b == 0.0) {
      return "Callendar-Van Dusen A, B, C must be finite and B non-zero";
    }
    return std::nullopt;
  }
};

struct Applier {
  double x;
  Result<double, CalError> operator()(const Identity&) const { return x; }
  Result<double, CalError> operator()(const Linear& l) const {
    return finite_or_error(l.gain * x + l.offset);
  }
  Result<double, CalError> operator()(const Polynomial& p) const {
    if (p.coefficients.empty()) return fail(CalError::bad_coefficients);
    double y = 0.0;
    for (auto it = p.coefficients.rbegin(); it != p.coefficients.rend(); ++it) y = y * x + *it;
    return finite_or_error(y);
  }
  Result<double, CalError> operator()(const CountsToConcentration& f) const {
    return finite_or_error((x - f.dark_counts) * f.scale_factor);
  }
  Result<double, CalError> operator()(const SteinhartHart& s) const {
    return steinhart_hart_temperature(s, x);
  }
  Result<double, CalError> operator()(const CallendarVanDusen& c) const {
    return cvd_temperature(c, x);
  }
};

double cvd_r(const CallendarVanDusen& k, double t) {
  double ratio = 1.0 + k.a * t + k.b * t * t;
  if (t < 0.0) ratio += k.c * (t - 100.0) * t * t * t;
  return k.r0 * ratio;
}

}  // namespace

std::optional<std::string> check(const Calibration& cal) {
  return std::visit(Checker{}, cal);
}

Result<double, CalError> apply(const Calibration& cal, double raw) {
  if (!finite(raw)) return fail(CalError::not_finite);
  if (check(cal)) return fail(CalError::bad_coefficients);
  return std::visit(Applier{raw}, cal);
}

Result<double, CalError> cvd_resistance(const CallendarVanDusen& cvd, double t) {
  if (!finite(t)) return fail(CalError::not_finite);
  if (t < cvd_min_celsius || t > cvd_max_celsius) return fail(CalError::out_of_domain);
  return cvd_r(cvd, t);
}

Result<double, CalError> cvd_temperature(const CallendarVanDusen& k, double r) {
  if (!finite(r)) return fail(CalError::not_finite);
  if (k.r0 <= 0.0 || k.b == 0.0) return fail(CalError::bad_coefficients);
  const double r_min = cvd_r(k, cvd_min_celsius);
  const double r_max = cvd_r(k, cvd_max_celsius);
  const double slack = 1e-9 * k.r0;
  if (r < r_min - slack || r > r_max + slack) return fail(CalError::out_of_domain);

  // Closed form of R0 (1 + A t + B t^2) = R; exact at and above 0 degC and the
  // starting point below it.
  const double disc = k.a * k.a - 4.0 * k.b * (1.0 - r / k.r0);
  if (disc < 0.0) return fail(CalError::out_of_domain);
  double t = (-k.a + std::sqrt(disc)) / (2.0 * k.b);
  if (r >= k.r0) return t;

  // Below 0 degC: Newton on f(t) = R(t) - R with the C term.
  for (int i = 0; i < 50; ++i) {
    const double f = cvd_r(k, t) - r;
    const double df = k.r0 * (k.a + 2.0 * k.b * t + k.c * (4.0 * t * t * t - 300.0 * t * t));
    if (df == 0.0 || !finite(df)) return fail(CalError::no_convergence);
    const double step = f / df;
    t -= step;
    if (std::fabs(step) < 1e-10) return t;
  }
  return fail(CalError::no_convergence);
}

Result<double, CalError> steinhart_hart_temperature(const SteinhartHart& s, double r) {
  if (!finite(r)) return fail(CalError::not_finite);
  if (r <= 0.0) return fail(CalError::out_of_domain);
  const double ln_r = std::log(r);
  const double inv_t = s.a + s.b * ln_r + s.c * ln_r * ln_r * ln_r;
  if (!(inv_t > 0.0) || !finite(inv_t)) return fail(CalError::out_of_domain);
  return 1.0 / inv_t - kelvin_offset;
}

Result<double, CalError> steinhart_hart_resistance(const SteinhartHart& s, double t_celsius) {
  if (!finite(t_celsius)) return fail(CalError::not_finite);
  const double t = t_celsius + kelvin_offset;
  if (t <= 0.0) return fail(CalError::out_of_domain);
  double ln_r = 0.0;
  if (s.c == 0.0) {
    if (s.b == 0.0) return fail(CalError::bad_coefficients);
    ln_r = (1.0 / t - s.a) / s.b;
  } else {
    // C L^3 + B L + (A - 1/T) = 0, one real root (Cardano, for B/C > 0):
    // x = (A - 1/T) / C, y = sqrt((B / 3C)^3 + x^2 / 4), L = cbrt(y - x/2) - cbrt(y + x/2).
    const double x = (s.a - 1.0 / t) / s.c;
    const double p3 = s.b / (3.0 * s.c);
    const double y2 = p3 * p3 * p3 + x * x / 4.0;
    if (y2 < 0.0) return fail(CalError::out_of_domain);
    const double y = std::sqrt(y2);
    ln_r = std::cbrt(y - x / 2.0) - std::cbrt(y + x / 2.0);
  }
  return finite_or_error(std::exp(ln_r));
}

}  // namespace tarn::protocol::calibration
