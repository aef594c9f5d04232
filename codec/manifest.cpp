#include "codec/manifest.h"

#include <cmath>
#include <cstdio>
#include <set>

#include "codec/bit_io.h"
#include "codec/crc32c.h"

namespace tarn::codec {

namespace {

// Days since 1970-01-01 of a proleptic Gregorian date: the days_from_civil algorithm of
// Howard Hinnant, "chrono-Compatible Low-Level Date Algorithms" (public domain).
constexpr std::int64_t days_from_civil(std::int64_t y, unsigned m, unsigned d) {
  y -= m <= 2;
  const std::int64_t era = (y >= 0 ? y : y - 399) / 400;
  const unsigned yoe = unsigned(y - era * 400);
  const unsigned doy = (153 * (m > 2 ? m - 3 : m + 9) + 2) / 5 + d - 1;
  const unsigned doe = yoe * 365 + yoe / 4 - yoe / 100 + doy;
  return era * 146097 + std::int64_t(doe) - 719468;
}

constexpr bool leap_year(std::int64_t y) {
  return (y % 4 == 0 && y % 100 != 0) || y % 400 == 0;
}

// Dates carried in the manifest: 1900-01-01 .. 2299-12-31, like times (§1.4).
constexpr std::int64_t kMinDay = days_from_civil(1900, 1, 1);
constexpr std::int64_t kMaxDay = days_from_civil(2299, 12, 31);

// Elevation and depth limits: the deepest ocean trench (about 11 km) and the highest
// summit (about 8.8 km) bound any station on Earth (from memory, rounded outwards).
constexpr double kMinElevation = -11000, kMaxElevation = 9000, kMaxDepth = 11000;

}  // namespace

std::optional<std::int64_t> days_of_date(const std::string& t) {
  if (t.size() != 10 || t[4] != '-' || t[7] != '-') return std::nullopt;
  for (std::size_t i : {0, 1, 2, 3, 5, 6, 8, 9})
    if (t[i] < '0' || t[i] > '9') return std::nullopt;
  const int y = std::stoi(t.substr(0, 4));
  const unsigned m = unsigned(std::stoi(t.substr(5, 2))), d = unsigned(std::stoi(t.substr(8, 2)));
  static constexpr unsigned kDays[12] = {31, 28, 31, 30, 31, 30, 31, 31, 30, 31, 30, 31};
  if (y < 1900 || y > 2299 || m < 1 || m > 12 || d < 1) return std::nullopt;
  if (d > kDays[m - 1] + (m == 2 && leap_year(y) ? 1 : 0)) return std::nullopt;
  return days_from_civil(y, m, d);
}

std::string date_of_days(std::int64_t z) {
  // civil_from_days, the inverse in the same paper.
  z += 719468;
  const std::int64_t era = (z >= 0 ? z : z - 146096) / 146097;
  const unsigned doe = unsigned(z - era * 146097);
  const unsigned yoe = (doe - doe / 1460 + doe / 36524 - doe / 146096) / 365;
  const unsigned doy = doe - (365 * yoe + yoe / 4 - yoe / 100);
  const unsigned mp = (5 * doy + 2) / 153;
  const unsigned d = doy - (153 * mp + 2) / 5 + 1;
  const unsigned m = mp < 10 ? mp + 3 : mp - 9;
  const std::int64_t y = std::int64_t(yoe) + era * 400 + (m <= 2);
  char buf[40];
  std::snprintf(buf, sizeof buf, "%04d-%02u-%02u", int(y), m, d);
  return buf;
}

Result<Ok> validate(const Manifest& m) {
  auto bad = [](std::string msg) { return make_error(Errc::invalid_input, "manifest: " + msg); };
  if (m.station.empty() || m.station.size() > kMaxTextBytes)
    return bad("station must be 1.." + std::to_string(kMaxTextBytes) + " bytes");
  if (m.period_s == 0) return bad("period_s must be > 0");
  if (m.window_s == 0 || m.window_s % m.period_s != 0)
    return bad("window_s must be a positive multiple of period_s (" + std::to_string(m.period_s) +
               ")");
  if (m.slots_per_window() > kMaxSlotsPerWindow)
    return bad("window_s / period_s is " + std::to_string(m.slots_per_window()) + ", at most " +
               std::to_string(kMaxSlotsPerWindow) + " allowed");
  if (m.latitude.has_value() != m.longitude.has_value())
    return bad("latitude and longitude must be given together");
  if (m.latitude && !(std::isfinite(*m.latitude) && std::fabs(*m.latitude) <= 90))
    return bad("latitude must be a number of degrees in [-90, 90]");
  if (m.longitude && !(std::isfinite(*m.longitude) && std::fabs(*m.longitude) <= 180))
    return bad("longitude must be a number of degrees in [-180, 180]");
  if (m.elevation_m && !(std::isfinite(*m.elevation_m) && *m.elevation_m >= kMinElevation &&
                         *m.elevation_m <= kMaxElevation))
    return bad("elevation_m must be a number of metres in [-11000, 9000]");
  if (m.channels.empty() || m.channels.size() > kMaxChannels)
    return bad("channels must hold 1.." + std::to_string(kMaxChannels) + " entries");
  std::set<std::string> names;
  for (std::size_t i = 0; i < m.channels.size(); ++i) {
    const auto& c = m.channels[i];
    std::string where = "channels[" + std::to_string(i) + "]";
    if (c.name.empty() || c.name.size() > kMaxTextBytes)
      return bad(where + ".name must be 1.." + std::to_string(kMaxTextBytes) + " bytes");
    if (!names.insert(c.name).second) return bad(where + ".name '" + c.name + "' is repeated");
    if (c.quantity.size() > kMaxTextBytes || c.unit.size() > kMaxTextBytes ||
        c.instrument.size() > kMaxTextBytes)
      return bad(where + ": quantity, unit and instrument are at most " +
                 std::to_string(kMaxTextBytes) + " bytes");
    if (c.unit.empty()) return bad(where + ".unit must be a UCUM code such as \"ug/L\"");
    if (!(std::isfinite(c.resolution) && c.resolution > 0 && c.resolution <= 1e9 &&
          c.resolution >= 1e-12))
      return bad(where + ".resolution must be a number in [1e-12, 1e9]");
    if (c.depth_m && !(std::isfinite(*c.depth_m) && std::fabs(*c.depth_m) <= kMaxDepth))
      return bad(where + ".depth_m must be a number of metres in [-11000, 11000]");
    if (c.model.size() > kMaxTextBytes || c.serial.size() > kMaxTextBytes)
      return bad(where + ": model and serial are at most " + std::to_string(kMaxTextBytes) +
                 " bytes");
    if (!c.calibrated_on.empty() && !days_of_date(c.calibrated_on))
      return bad(where + ".calibrated_on must be a date YYYY-MM-DD in 1900..2299, is \"" +
                 c.calibrated_on + "\"");
  }
  return Ok{};
}

std::vector<std::uint8_t> canonical_bytes(const Manifest& m, std::uint8_t version) {
  const bool v2 = version >= 2;
  std::vector<std::uint8_t> out;
  put_string(out, m.station);
  put_varint(out, m.period_s);
  put_varint(out, m.window_s);
  if (v2) {
    out.push_back(std::uint8_t((m.latitude ? 1 : 0) | (m.elevation_m ? 2 : 0)));
    if (m.latitude) put_f64le(out, *m.latitude), put_f64le(out, *m.longitude);
    if (m.elevation_m) put_f64le(out, *m.elevation_m);
  }
  put_varint(out, m.channels.size());
  for (const auto& c : m.channels) {
    put_string(out, c.name);
    put_string(out, c.quantity);
    put_string(out, c.unit);
    put_f64le(out, c.resolution);
    put_string(out, c.instrument);
    if (!v2) continue;
    out.push_back(std::uint8_t((c.depth_m ? 1 : 0) | (c.calibrated_on.empty() ? 0 : 2)));
    if (c.depth_m) put_f64le(out, *c.depth_m);
    put_string(out, c.model);
    put_string(out, c.serial);
    if (!c.calibrated_on.empty()) put_varint(out, zigzag(*days_of_date(c.calibrated_on)));
  }
  return out;
}

std::uint32_t manifest_hash(const Manifest& m, std::uint8_t version) {
  return crc32c(canonical_bytes(m, version));
}

Result<Manifest> parse_canonical_manifest(std::span<const std::uint8_t> bytes,
                                          std::uint8_t version) {
  const bool v2 = version >= 2;
  auto bad = [](const char* what) {
    return make_error(Errc::malformed, std::string("manifest bytes: ") + what);
  };
  ByteReader r(bytes);
  Manifest m;
  auto station = r.string();
  auto period = r.varint();
  auto window = r.varint();
  if (!station || !period || !window) return bad("truncated header");
  if (*period > UINT32_MAX || *window > UINT32_MAX) return bad("period or window too large");
  m.station = *station;
  m.period_s = std::uint32_t(*period);
  m.window_s = std::uint32_t(*window);
  if (v2) {
    auto fields = r.u8();
    if (!fields) return bad("truncated header");
    if (*fields & ~3u) return bad("unknown station field bits");
    if (*fields & 1) {
      auto lat = r.f64le(), lon = r.f64le();
      if (!lat || !lon) return bad("truncated position");
      m.latitude = *lat;
      m.longitude = *lon;
    }
    if (*fields & 2) {
      auto el = r.f64le();
      if (!el) return bad("truncated elevation");
      m.elevation_m = *el;
    }
  }
  auto count = r.varint();
  if (!count) return bad("truncated header");
  if (*count > kMaxChannels) return bad("too many channels");
  for (std::uint64_t i = 0; i < *count; ++i) {
    ManifestChannel c;
    auto name = r.string();
    auto quantity = r.string();
    auto unit = r.string();
    auto res = r.f64le();
    auto instrument = r.string();
    if (!name || !quantity || !unit || !res || !instrument) return bad("truncated channel");
    c.name = *name;
    c.quantity = *quantity;
    c.unit = *unit;
    c.resolution = *res;
    c.instrument = *instrument;
    if (v2) {
      auto fields = r.u8();
      if (!fields) return bad("truncated channel");
      if (*fields & ~3u) return bad("unknown channel field bits");
      if (*fields & 1) {
        auto depth = r.f64le();
        if (!depth) return bad("truncated channel");
        c.depth_m = *depth;
      }
      auto model = r.string(), serial = r.string();
      if (!model || !serial) return bad("truncated channel");
      c.model = *model;
      c.serial = *serial;
      if (*fields & 2) {
        auto days = r.varint();
        if (!days) return bad("truncated channel");
        const std::int64_t d = unzigzag(*days);
        if (d < kMinDay || d > kMaxDay) return bad("calibration date outside 1900..2299");
        c.calibrated_on = date_of_days(d);
      }
    }
    m.channels.push_back(std::move(c));
  }
  if (!r.at_end()) return bad("trailing bytes");
  if (auto v = validate(m); !v) return make_error(Errc::malformed, v.error().message);
  return m;
}

int channel_index(const Manifest& m, const std::string& name) {
  for (std::size_t i = 0; i < m.channels.size(); ++i)
    if (m.channels[i].name == name) return int(i);
  return -1;
}

}  // namespace tarn::codec
