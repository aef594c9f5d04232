#include "daemon/core/manifest_json.h"

#include <fstream>
#include <set>

namespace tarn::daemon {
namespace {

codec::Error bad(const std::string& pointer, const std::string& what) {
  return codec::make_error(codec::Errc::invalid_input, pointer + ": " + what);
}

}  // namespace

codec::Result<codec::Manifest> manifest_from_json(const nlohmann::json& j) {
  using nlohmann::json;
  if (!j.is_object()) return bad("/", "the manifest must be a JSON object");
  static const std::set<std::string> top{"station",  "period_s",  "window_s",   "channels",
                                         "latitude", "longitude", "elevation_m"};
  static const std::set<std::string> chan{"name",       "quantity",   "unit",
                                          "resolution", "instrument", "depth_m",
                                          "model",      "serial",     "calibrated_on"};
  for (auto& [k, _] : j.items())
    if (!top.count(k))
      return bad("/" + k,
                 "unknown key; allowed: station, period_s, window_s, latitude, longitude, "
                 "elevation_m, channels");
  codec::Manifest m;
  auto text = [&](const json& o, const std::string& key, const std::string& ptr, bool required,
                  std::string& out) -> std::optional<codec::Error> {
    if (!o.contains(key)) {
      if (required) return bad(ptr + "/" + key, "missing; a string is required");
      return std::nullopt;
    }
    if (!o[key].is_string()) return bad(ptr + "/" + key, "must be a string");
    out = o[key].get<std::string>();
    return std::nullopt;
  };
  auto seconds = [&](const std::string& key, std::uint32_t& out) -> std::optional<codec::Error> {
    if (!j.contains(key) || !j[key].is_number_integer() || j[key].get<std::int64_t>() < 1 ||
        j[key].get<std::int64_t>() > 100000000)
      return bad("/" + key, "must be an integer number of seconds, 1..100000000");
    out = j[key].get<std::uint32_t>();
    return std::nullopt;
  };
  if (auto e = text(j, "station", "", true, m.station)) return *e;
  if (auto e = seconds("period_s", m.period_s)) return *e;
  if (auto e = seconds("window_s", m.window_s)) return *e;
  // Optional numbers: absent when the key is absent.
  auto optional_number = [&](const json& o, const std::string& key, const std::string& ptr,
                             std::optional<double>& out) -> std::optional<codec::Error> {
    if (!o.contains(key)) return std::nullopt;
    if (!o[key].is_number()) return bad(ptr + "/" + key, "must be a number");
    out = o[key].get<double>();
    return std::nullopt;
  };
  if (auto e = optional_number(j, "latitude", "", m.latitude)) return *e;
  if (auto e = optional_number(j, "longitude", "", m.longitude)) return *e;
  if (auto e = optional_number(j, "elevation_m", "", m.elevation_m)) return *e;
  if (!j.contains("channels") || !j["channels"].is_array())
    return bad("/channels", "must be an array of channel objects");
  for (std::size_t i = 0; i < j["channels"].size(); ++i) {
    const json& c = j["channels"][i];
    const std::string ptr = "/channels/" + std::to_string(i);
    if (!c.is_object()) return bad(ptr, "must be an object");
    for (auto& [k, _] : c.items())
      if (!chan.count(k))
        return bad(ptr + "/" + k,
                   "unknown key; allowed: name, quantity, unit, resolution, instrument, "
                   "depth_m, model, serial, calibrated_on");
    codec::ManifestChannel mc;
    if (auto e = text(c, "name", ptr, true, mc.name)) return *e;
    if (auto e = text(c, "quantity", ptr, true, mc.quantity)) return *e;
    if (auto e = text(c, "unit", ptr, true, mc.unit)) return *e;
    if (auto e = text(c, "instrument", ptr, false, mc.instrument)) return *e;
    if (auto e = optional_number(c, "depth_m", ptr, mc.depth_m)) return *e;
    if (auto e = text(c, "model", ptr, false, mc.model)) return *e;
    if (auto e = text(c, "serial", ptr, false, mc.serial)) return *e;
    if (auto e = text(c, "calibrated_on", ptr, false, mc.calibrated_on)) return *e;
    if (!c.contains("resolution") || !c["resolution"].is_number())
      return bad(ptr + "/resolution", "must be a number > 0, e.g. 0.01");
    mc.resolution = c["resolution"].get<double>();
    m.channels.push_back(std::move(mc));
  }
  if (auto v = codec::validate(m); !v) {
    // Map the codec's field names onto JSON pointers.
    std::string msg = v.error().message;
    const std::string prefix = "manifest: ";
    if (msg.rfind(prefix, 0) == 0) msg = msg.substr(prefix.size());
    std::string ptr = "/";
    if (auto lb = msg.find("channels["); lb == 0) {
      auto rb = msg.find(']');
      auto dot = msg.find_first_of(".: ", rb);
      auto end = msg.find(' ', dot + 1);
      ptr = "/channels/" + msg.substr(9, rb - 9);
      if (dot != std::string::npos && msg[dot] == '.')
        ptr += "/" + msg.substr(dot + 1, end - dot - 1);
    } else if (msg.rfind("latitude and longitude", 0) == 0) {
      ptr += m.latitude ? "longitude" : "latitude";
    } else {
      ptr += msg.substr(0, msg.find(' '));
    }
    return bad(ptr, msg);
  }
  return m;
}

codec::Result<codec::Manifest> load_manifest_file(const std::string& path) {
  std::ifstream in(path);
  if (!in) return codec::make_error(codec::Errc::invalid_input, path + ": cannot be read");
  nlohmann::json j;
  try {
    j = nlohmann::json::parse(in);
  } catch (const nlohmann::json::parse_error& e) {
    return codec::make_error(codec::Errc::invalid_input,
                             path + ": not JSON (byte " + std::to_string(e.byte) + ")");
  }
  auto m = manifest_from_json(j);
  if (!m) return codec::make_error(m.error().code, path + ": " + m.error().message);
  return m;
}

nlohmann::json manifest_to_json(const codec::Manifest& m) {
  nlohmann::json chans = nlohmann::json::array();
  for (const auto& c : m.channels) {
    nlohmann::json jc{
        {"name", c.name}, {"quantity", c.quantity}, {"unit", c.unit}, {"resolution", c.resolution}};
    if (!c.instrument.empty()) jc["instrument"] = c.instrument;
    if (c.depth_m) jc["depth_m"] = *c.depth_m;
    if (!c.model.empty()) jc["model"] = c.model;
    if (!c.serial.empty()) jc["serial"] = c.serial;
    if (!c.calibrated_on.empty()) jc["calibrated_on"] = c.calibrated_on;
    chans.push_back(std::move(jc));
  }
  nlohmann::json j{{"station", m.station}, {"period_s", m.period_s}, {"window_s", m.window_s}};
  if (m.latitude) j["latitude"] = *m.latitude;
  if (m.longitude) j["longitude"] = *m.longitude;
  if (m.elevation_m) j["elevation_m"] = *m.elevation_m;
  j["channels"] = std::move(chans);
  return j;
}

codec::Result<codec::Manifest> manifest_of_config(const config::StationConfig& c) {
  codec::Manifest m;
  m.station = c.station.id;
  m.period_s = std::uint32_t(c.sampling.period_s);
  m.window_s = std::uint32_t(c.sampling.window_s);
  m.latitude = c.station.latitude;
  m.longitude = c.station.longitude;
  m.elevation_m = c.station.elevation_m;
  for (const auto& in : c.instruments) {
    if (in.period_s != 0 && in.period_s != c.sampling.period_s)
      return bad(in.pointer + "/period_s",
                 "instrument samples every " + std::to_string(in.period_s) +
                     " s; packets carry one period per station (sampling.period_s = " +
                     std::to_string(c.sampling.period_s) + ")");
    for (const auto& ch : in.channels)
      m.channels.push_back({ch.name, ch.quantity, ch.unit, ch.resolution, in.name, ch.depth_m,
                            in.model, in.serial, in.calibrated_on});
  }
  if (auto v = codec::validate(m); !v) return v.error();
  return m;
}

}  // namespace tarn::daemon
