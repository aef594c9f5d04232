// Sun position checks against sources outside the project:
//  - the worked example of the NREL Solar Position Algorithm (Reda, I. and
//    Andreas, A., 2004, "Solar position algorithm for solar radiation
//    applications", Solar Energy 76(5)), its table of results;
//  - python3-ephem (Debian's package, PyEphem 4.x) at 1,000 random times and
//    places.
#include <catch2/catch.hpp>

#include <chrono>
#include <cmath>
#include <cstdio>
#include <iostream>
#include <random>
#include <sstream>
#include <string>

#include "daemon/pipeline/solar_position.h"

using namespace tarn::pipeline;

namespace {

std::int64_t unix_time(int y, unsigned m, unsigned d, int hh, int mm, int ss) {
  namespace c = std::chrono;
  const c::sys_days date = c::year_month_day{c::year{y}, c::month{m}, c::day{d}};
  return c::duration_cast<c::seconds>(date.time_since_epoch()).count() + hh * 3600 + mm * 60 + ss;
}

}  // namespace

TEST_CASE("sun position matches the NREL SPA worked example", "[solar]") {
  // Reda & Andreas 2004, example: 17 October 2003, 12:30:30 local time at
  // UTC-7 (19:30:30 UTC), latitude 39.742476, longitude -105.1786, elevation
  // 1830.14 m, pressure 820 mbar, temperature 11 C -> topocentric zenith
  // 50.11162 deg, topocentric azimuth 194.34024 deg. The SPA zenith includes
  // refraction, so refraction is added here with the SPA's own formula.
  const std::int64_t t = unix_time(2003, 10, 17, 19, 30, 30);
  const SunPosition p = sun_position(static_cast<double>(t), 39.742476, -105.1786);
  const double apparent_elevation = p.elevation_deg + refraction_deg(p.elevation_deg, 820.0, 11.0);
  const double zenith = 90.0 - apparent_elevation;
  INFO("zenith " << zenith << " azimuth " << p.azimuth_deg);
  CHECK(std::fabs(zenith - 50.11162) < 0.05);
  CHECK(std::fabs(p.azimuth_deg - 194.34024) < 0.05);
  // Refraction at ~40 deg elevation is about one arc minute (SPA formula).
  CHECK(refraction_deg(p.elevation_deg, 820.0, 11.0) > 0.01);
  CHECK(refraction_deg(p.elevation_deg, 820.0, 11.0) < 0.03);
}

TEST_CASE("sun elevation matches python3-ephem at 1,000 random times and places", "[solar]") {
  // Reference: PyEphem (Debian's python3-ephem), Observer with pressure = 0 so
  // that its altitude is geometric (no refraction), like ours; elevation 0 m.
  // Times are uniform over 1970..2070, latitude uniform in [-65, 65].
  const char* cmd = R"(/usr/bin/python3 - <<'PYEOF' 2>&1
import sys
try:
    import ephem
except ImportError:
    print("NO-EPHEM")
    sys.exit(0)
import datetime, math, random
random.seed(20240611)
epoch = datetime.datetime(1970, 1, 1)
for _ in range(1000):
    t = random.randint(0, 3155760000)
    lat = random.uniform(-65.0, 65.0)
    lon = random.uniform(-180.0, 180.0)
    o = ephem.Observer()
    o.lat = math.radians(lat)
    o.lon = math.radians(lon)
    o.elevation = 0
    o.pressure = 0
    o.date = ephem.Date(epoch + datetime.timedelta(seconds=t))
    s = ephem.Sun(o)
    print(t, repr(lat), repr(lon), repr(math.degrees(s.alt)), repr(math.degrees(s.az)))
PYEOF
)";
  FILE* f = popen(cmd, "r");
  // python3-ephem is installed by .ci/install-deps: without it this check
  // could not run, and that is a failure, not a skip.
  REQUIRE(f != nullptr);
  std::string text;
  char buf[4096];
  while (std::size_t n = std::fread(buf, 1, sizeof buf, f)) text.append(buf, n);
  const int rc = pclose(f);
  INFO("/usr/bin/python3 with ephem (python3-ephem) said: " << text.substr(0, 200));
  REQUIRE(text.find("NO-EPHEM") == std::string::npos);
  REQUIRE(rc == 0);
  REQUIRE_FALSE(text.empty());
  std::istringstream in(text);
  int n = 0;
  double worst = 0, worst_az = 0;
  std::int64_t t;
  double lat, lon, alt, az;
  while (in >> t >> lat >> lon >> alt >> az) {
    const SunPosition p = sun_position(static_cast<double>(t), lat, lon);
    const double d = std::fabs(p.elevation_deg - alt);
    worst = std::max(worst, d);
    if (alt > -80 && std::fabs(lat) < 60) {  // azimuth is ill-defined near the zenith only
      double da = std::fabs(p.azimuth_deg - az);
      da = std::min(da, 360.0 - da);
      if (p.elevation_deg < 85) worst_az = std::max(worst_az, da);
    }
    INFO("t=" << t << " lat=" << lat << " lon=" << lon << " ephem alt=" << alt
              << " ours=" << p.elevation_deg);
    CHECK(d < 0.1);
    ++n;
  }
  CHECK(n == 1000);
  std::cout << "sun elevation vs python3-ephem: " << n << " points, max |diff| = " << worst
            << " deg (limit 0.1); max azimuth diff (elevation < 85) = " << worst_az << " deg\n";
}

TEST_CASE("cached sun elevation stays within 0.01 deg of the full computation", "[solar]") {
  std::mt19937_64 rng(7);
  std::uniform_real_distribution<double> lat_d(-65, 65), lon_d(-180, 180);
  std::uniform_int_distribution<std::int64_t> t_d(0, 3155760000LL);
  double worst = 0;
  for (int place = 0; place < 50; ++place) {
    const double lat = lat_d(rng), lon = lon_d(rng);
    SunElevationCache cache(lat, lon);
    std::int64_t t = t_d(rng);
    for (int i = 0; i < 2000; ++i, t += 37) {  // walks ~20 h in 37 s steps
      const double d = std::fabs(cache.elevation_deg(t) - sun_position(t, lat, lon).elevation_deg);
      worst = std::max(worst, d);
    }
  }
  INFO("worst " << worst);
  CHECK(worst < 0.01);
}

TEST_CASE("sun is high at local noon and below the horizon at local midnight", "[solar]") {
  // A sanity check that cannot pass with a sign error in longitude or time:
  // at the June solstice, lat 47 N, lon 8 E, local solar noon is ~11:28 UTC
  // and the elevation there is about 90 - 47 + 23.44 = 66.4 deg (geometry).
  const std::int64_t noon = unix_time(2024, 6, 21, 11, 28, 0);
  const SunPosition p = sun_position(static_cast<double>(noon), 47.0, 8.0);
  CHECK(p.elevation_deg == Approx(66.4).margin(0.3));
  CHECK(std::fabs(p.azimuth_deg - 180.0) < 3.0);
  const SunPosition night = sun_position(static_cast<double>(noon + 12 * 3600), 47.0, 8.0);
  CHECK(night.elevation_deg == Approx(-(90 - 47 - 23.44)).margin(0.3));
}
