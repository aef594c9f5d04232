#include "daemon/pipeline/solar_position.h"

#include <cmath>
#include <numbers>

namespace tarn::pipeline {
namespace {

constexpr double kDeg = std::numbers::pi / 180.0;

double wrap360(double a) {
  a = std::fmod(a, 360.0);
  return a < 0 ? a + 360.0 : a;
}

struct SolarDay {
  double declination_rad;
  double eot_min;
};

// NOAA solar calculator, columns G..V (Julian century -> declination, EoT).
SolarDay solar_day(double unix_s) {
  const double jd = unix_s / 86400.0 + 2440587.5;
  const double T = (jd - 2451545.0) / 36525.0;
  const double L0 = wrap360(280.46646 + T * (36000.76983 + T * 0.0003032));
  const double M = 357.52911 + T * (35999.05029 - 0.0001537 * T);
  const double e = 0.016708634 - T * (0.000042037 + 0.0000001267 * T);
  const double Mr = M * kDeg;
  const double C = std::sin(Mr) * (1.914602 - T * (0.004817 + 0.000014 * T)) +
                   std::sin(2 * Mr) * (0.019993 - 0.000101 * T) + std::sin(3 * Mr) * 0.000289;
  const double true_long = L0 + C;
  const double omega = (125.04 - 1934.136 * T) * kDeg;
  const double lambda = (true_long - 0.00569 - 0.00478 * std::sin(omega)) * kDeg;
  const double eps0 =
      23.0 + (26.0 + (21.448 - T * (46.815 + T * (0.00059 - T * 0.001813))) / 60.0) / 60.0;
  const double eps = (eps0 + 0.00256 * std::cos(omega)) * kDeg;
  const double dec = std::asin(std::sin(eps) * std::sin(lambda));
  const double y = std::tan(eps / 2) * std::tan(eps / 2);
  const double L0r = L0 * kDeg;
  const double eot =
      4.0 / kDeg *
      (y * std::sin(2 * L0r) - 2 * e * std::sin(Mr) + 4 * e * y * std::sin(Mr) * std::cos(2 * L0r) -
       0.5 * y * y * std::sin(4 * L0r) - 1.25 * e * e * std::sin(2 * Mr));
  return {dec, eot};
}

// Hour angle in radians from UTC time, EoT and longitude (NOAA columns AB, AC).
double hour_angle_rad(double unix_s, double eot_min, double longitude_deg) {
  double minutes = std::fmod(unix_s, 86400.0) / 60.0;
  if (minutes < 0) minutes += 1440.0;
  const double tst = std::fmod(minutes + eot_min + 4.0 * longitude_deg, 1440.0);
  return (tst / 4.0 - 180.0) * kDeg;
}

}  // namespace

SunPosition sun_position(double unix_s, double latitude_deg, double longitude_deg) {
  const SolarDay d = solar_day(unix_s);
  const double ha = hour_angle_rad(unix_s, d.eot_min, longitude_deg);
  const double lat = latitude_deg * kDeg;
  double cz = std::sin(lat) * std::sin(d.declination_rad) +
              std::cos(lat) * std::cos(d.declination_rad) * std::cos(ha);
  cz = std::fmax(-1.0, std::fmin(1.0, cz));
  const double zenith = std::acos(cz);
  // Azimuth measured from south, westward, then turned to north, eastward.
  const double az_s = std::atan2(
      std::sin(ha), std::cos(ha) * std::sin(lat) - std::tan(d.declination_rad) * std::cos(lat));
  SunPosition p;
  p.zenith_deg = zenith / kDeg;
  p.elevation_deg = 90.0 - p.zenith_deg;
  p.azimuth_deg = wrap360(az_s / kDeg + 180.0);
  p.declination_deg = d.declination_rad / kDeg;
  p.equation_of_time_min = d.eot_min;
  return p;
}

double refraction_deg(double elevation_deg, double pressure_hpa, double temperature_c) {
  if (elevation_deg < -0.8333) return 0.0;
  const double e = elevation_deg;
  return (pressure_hpa / 1010.0) * (283.0 / (273.0 + temperature_c)) * 1.02 /
         (60.0 * std::tan((e + 10.3 / (e + 5.11)) * kDeg));
}

SunElevationCache::SunElevationCache(double latitude_deg, double longitude_deg,
                                     std::int64_t refresh_s)
    : lat_rad_(latitude_deg * kDeg),
      lon_deg_(longitude_deg),
      sin_lat_(std::sin(lat_rad_)),
      cos_lat_(std::cos(lat_rad_)),
      refresh_s_(refresh_s > 0 ? refresh_s : 1) {}

double SunElevationCache::elevation_deg(std::int64_t t) {
  if (!valid_ || t - t0_ > refresh_s_ || t0_ - t > refresh_s_) {
    const SolarDay d = solar_day(static_cast<double>(t));
    sin_dec_ = std::sin(d.declination_rad);
    cos_dec_ = std::cos(d.declination_rad);
    eot_min_ = d.eot_min;
    t0_ = t;
    valid_ = true;
  }
  const double ha = hour_angle_rad(static_cast<double>(t), eot_min_, lon_deg_);
  double s = sin_lat_ * sin_dec_ + cos_lat_ * cos_dec_ * std::cos(ha);
  s = std::fmax(-1.0, std::fmin(1.0, s));
  return std::asin(s) / kDeg;
}

}  // namespace tarn::pipeline
