#include "codec/manifest.h"

#include <cmath>
#include <set>

#include "codec/bit_io.h"
#include "codec/crc32c.h"

namespace tarn::codec {

Expected<Ok> validate(const Manifest& m) {
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
  }
  return Ok{};
}

std::vector<std::uint8_t> canonical_bytes(const Manifest& m) {
  std::vector<std::uint8_t> out;
  put_string(out, m.station);
  put_varint(out, m.period_s);
  put_varint(out, m.window_s);
  put_varint(out, m.channels.size());
  for (const auto& c : m.channels) {
    put_string(out, c.name);
    put_string(out, c.quantity);
    put_string(out, c.unit);
    put_f64le(out, c.resolution);
    put_string(out, c.instrument);
  }
  return out;
}

std::uint32_t manifest_hash(const Manifest& m) {
  return crc32c(canonical_bytes(m));
}

Expected<Manifest> parse_canonical_manifest(std::span<const std::uint8_t> bytes) {
  auto bad = [](const char* what) {
    return make_error(Errc::malformed, std::string("manifest bytes: ") + what);
  };
  ByteReader r(bytes);
  Manifest m;
  auto station = r.string();
  auto period = r.varint();
  auto window = r.varint();
  auto count = r.varint();
  if (!station || !period || !window || !count) return bad("truncated header");
  if (*period > UINT32_MAX || *window > UINT32_MAX) return bad("period or window too large");
  if (*count > kMaxChannels) return bad("too many channels");
  m.station = *station;
  m.period_s = std::uint32_t(*period);
  m.window_s = std::uint32_t(*window);
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
