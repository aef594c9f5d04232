// JSON form of codec records for the test vectors in codec/vectors/ (tests only; the
// codec itself is standard-library only). The manifest form is the M.json file format
// of codec/FORMAT.md §9.
#pragma once

#include <cmath>
#include <cstdio>
#include <fstream>
#include <nlohmann/json.hpp>
#include <sstream>
#include <stdexcept>

#include "codec/decoder.h"
#include "codec/encoder.h"

namespace codec_json {

using namespace tarn::codec;
using nlohmann::json;

inline json manifest_to_json(const Manifest& m) {
  json j{{"station", m.station}, {"period_s", m.period_s}, {"window_s", m.window_s}};
  if (m.latitude) j["latitude"] = *m.latitude, j["longitude"] = *m.longitude;
  if (m.elevation_m) j["elevation_m"] = *m.elevation_m;
  json cs = json::array();
  for (const auto& c : m.channels) {
    json jc{
        {"name", c.name}, {"quantity", c.quantity}, {"unit", c.unit}, {"resolution", c.resolution}};
    if (!c.instrument.empty()) jc["instrument"] = c.instrument;
    if (c.depth_m) jc["depth_m"] = *c.depth_m;
    if (!c.model.empty()) jc["model"] = c.model;
    if (!c.serial.empty()) jc["serial"] = c.serial;
    if (!c.calibrated_on.empty()) jc["calibrated_on"] = c.calibrated_on;
    cs.push_back(jc);
  }
  j["channels"] = cs;
  return j;
}

inline Manifest manifest_from_json(const json& j) {
  Manifest m;
  m.station = j.at("station").get<std::string>();
  m.period_s = j.at("period_s").get<std::uint32_t>();
  m.window_s = j.at("window_s").get<std::uint32_t>();
  if (j.contains("latitude")) m.latitude = j["latitude"].get<double>();
  if (j.contains("longitude")) m.longitude = j["longitude"].get<double>();
  if (j.contains("elevation_m")) m.elevation_m = j["elevation_m"].get<double>();
  for (const auto& jc : j.at("channels")) {
    ManifestChannel c;
    c.name = jc.at("name").get<std::string>();
    c.quantity = jc.at("quantity").get<std::string>();
    c.unit = jc.at("unit").get<std::string>();
    c.resolution = jc.at("resolution").get<double>();
    c.instrument = jc.value("instrument", std::string());
    if (jc.contains("depth_m")) c.depth_m = jc["depth_m"].get<double>();
    c.model = jc.value("model", std::string());
    c.serial = jc.value("serial", std::string());
    c.calibrated_on = jc.value("calibrated_on", std::string());
    m.channels.push_back(c);
  }
  return m;
}

// Decimal places that print a multiple of `res` exactly (0.01 -> 2, 0.5 -> 1, 10 -> 0).
inline int decimals_of(double res) {
  for (int d = 0; d < 12; ++d) {
    double scaled = res * std::pow(10.0, d);
    if (std::fabs(scaled - std::round(scaled)) < 1e-9 * scaled) return d;
  }
  return 12;
}

// The grid value nearest v, as the double that reads back from its short decimal form.
inline double on_grid(double v, double res) {
  char buf[64];
  std::snprintf(buf, sizeof buf, "%.*f", decimals_of(res), double(std::llround(v / res)) * res);
  return std::strtod(buf, nullptr);
}

inline json opt(const std::optional<double>& v) {
  return v ? json(*v) : json(nullptr);
}
inline json opt(const std::optional<std::int64_t>& v) {
  return v ? json(*v) : json(nullptr);
}

inline json stats_to_json(const ChannelStats& s) {
  return json{{"counts", s.counts},
              {"mean", opt(s.mean)},
              {"min", opt(s.min)},
              {"max", opt(s.max)},
              {"sd", opt(s.sd)},
              {"first_t", opt(s.first_t)},
              {"last_t", opt(s.last_t)},
              {"reasons_any", s.reasons_any},
              {"basis", s.basis == StatsBasis::not_evaluated ? "not_evaluated" : "used"}};
}

inline ChannelStats stats_from_json(const json& j) {
  ChannelStats s;
  s.counts = j.at("counts").get<std::array<std::uint32_t, 5>>();
  auto d = [&](const char* k) {
    return j.at(k).is_null() ? std::nullopt : std::optional<double>(j[k].get<double>());
  };
  auto t = [&](const char* k) {
    return j.at(k).is_null() ? std::nullopt : std::optional<std::int64_t>(j[k].get<std::int64_t>());
  };
  s.mean = d("mean"), s.min = d("min"), s.max = d("max"), s.sd = d("sd");
  s.first_t = t("first_t"), s.last_t = t("last_t");
  s.reasons_any = j.at("reasons_any").get<std::uint32_t>();
  s.basis = j.at("basis") == "not_evaluated" ? StatsBasis::not_evaluated : StatsBasis::used;
  return s;
}

inline json window_to_json(const Window& w) {
  json j{{"start", w.start},           {"slots", w.slots},
         {"partial", w.partial},       {"clock_unsynced", w.clock_unsynced},
         {"stats_only", w.stats_only}, {"first_channel", w.first_channel}};
  json cs = json::array();
  for (const auto& c : w.channels) {
    json jc;
    if (!w.stats_only) {
      json v = json::array(), f = json::array();
      for (auto& x : c.values) v.push_back(opt(x));
      for (auto x : c.flags) f.push_back(int(x));
      jc["values"] = v;
      jc["flags"] = f;
      if (!c.reasons.empty()) jc["reasons"] = c.reasons;
    }
    jc["stats"] = stats_to_json(c.stats);
    cs.push_back(jc);
  }
  j["channels"] = cs;
  return j;
}

inline Window window_from_json(const json& j) {
  Window w;
  w.start = j.at("start").get<std::int64_t>();
  w.slots = j.at("slots").get<std::uint32_t>();
  w.partial = j.at("partial").get<bool>();
  w.clock_unsynced = j.at("clock_unsynced").get<bool>();
  w.stats_only = j.value("stats_only", false);
  w.first_channel = j.value("first_channel", std::uint16_t(0));
  for (const auto& jc : j.at("channels")) {
    ChannelWindow c;
    if (jc.contains("values")) {
      for (const auto& v : jc["values"])
        c.values.push_back(v.is_null() ? std::nullopt : std::optional<double>(v.get<double>()));
      for (const auto& f : jc.at("flags")) c.flags.push_back(Flag(f.get<int>()));
    }
    if (jc.contains("reasons")) c.reasons = jc["reasons"].get<std::vector<std::uint32_t>>();
    c.stats = stats_from_json(jc.at("stats"));
    w.channels.push_back(std::move(c));
  }
  return w;
}

inline const char* const kAlertKinds[] = {"change", "stale", "resumed"};
inline const char* const kStaleCauses[] = {"none", "instrument_offline", "no_values",
                                           "all_failed_qc"};
template <std::size_t N>
inline std::uint8_t index_of(const char* const (&names)[N], const std::string& s) {
  for (std::size_t i = 0; i < N; ++i)
    if (s == names[i]) return std::uint8_t(i);
  throw std::runtime_error("unknown name " + s);
}

inline json alert_to_json(const AlertEvent& e) {
  return json{{"channel", e.channel},
              {"level", e.level},
              {"level_name", e.level_name},
              {"previous_level", e.previous_level},
              {"statistic", e.statistic},
              {"window_start", e.window_start},
              {"rule_id", e.rule_id},
              {"kind", kAlertKinds[int(e.kind)]},
              {"cause", kStaleCauses[int(e.cause)]}};
}
inline AlertEvent alert_from_json(const json& j) {
  AlertEvent e{j.at("channel").get<std::uint16_t>(),
               j.at("level").get<std::uint32_t>(),
               j.at("level_name").get<std::string>(),
               j.at("previous_level").get<std::uint32_t>(),
               j.at("statistic").get<double>(),
               j.at("window_start").get<std::int64_t>(),
               j.at("rule_id").get<std::string>(),
               AlertKind::change,
               StaleCause::none};
  e.kind = AlertKind(index_of(kAlertKinds, j.at("kind").get<std::string>()));
  e.cause = StaleCause(index_of(kStaleCauses, j.at("cause").get<std::string>()));
  return e;
}

inline json cleaning_to_json(const CleaningRecord& c) {
  return json{{"channel", c.channel},
              {"maintenance_start", c.maintenance_start},
              {"maintenance_end", c.maintenance_end},
              {"before", opt(c.before)},
              {"after", opt(c.after)},
              {"n_before", c.n_before},
              {"n_after", c.n_after}};
}
inline CleaningRecord cleaning_from_json(const json& j) {
  CleaningRecord c;
  c.channel = j.at("channel").get<std::uint16_t>();
  c.maintenance_start = j.at("maintenance_start").get<std::int64_t>();
  c.maintenance_end = j.at("maintenance_end").get<std::int64_t>();
  if (!j.at("before").is_null()) c.before = j["before"].get<double>();
  if (!j.at("after").is_null()) c.after = j["after"].get<double>();
  c.n_before = j.at("n_before").get<std::uint8_t>();
  c.n_after = j.at("n_after").get<std::uint8_t>();
  return c;
}

inline json health_to_json(const HealthRecord& h) {
  json j{{"t", h.t}, {"board_temp_c", opt(h.board_temp_c)}, {"supply_v", opt(h.supply_v)}};
  j["disk_free_mib"] = h.disk_free_mib ? json(*h.disk_free_mib) : json(nullptr);
  return j;
}
inline HealthRecord health_from_json(const json& j) {
  HealthRecord h;
  h.t = j.at("t").get<std::int64_t>();
  if (!j.at("board_temp_c").is_null()) h.board_temp_c = j["board_temp_c"].get<double>();
  if (!j.at("disk_free_mib").is_null()) h.disk_free_mib = j["disk_free_mib"].get<std::uint64_t>();
  if (!j.at("supply_v").is_null()) h.supply_v = j["supply_v"].get<double>();
  return h;
}

inline std::string hex32(std::uint32_t v) {
  char b[9];
  std::snprintf(b, sizeof b, "%08x", v);
  return b;
}

inline json packet_to_json(const DecodedPacket& p) {
  json j{{"version", p.header.version},
         {"sequence", p.header.sequence},
         {"clock_unsynced", p.header.clock_unsynced},
         {"partial", p.header.partial},
         {"manifest_hash", hex32(p.header.manifest_hash)}};
  json ws = json::array(), as = json::array(), hs = json::array(), cs = json::array();
  for (auto& w : p.windows) ws.push_back(window_to_json(w));
  for (auto& a : p.alerts) as.push_back(alert_to_json(a));
  for (auto& h : p.health) hs.push_back(health_to_json(h));
  for (auto& c : p.cleanings) cs.push_back(cleaning_to_json(c));
  j["windows"] = ws;
  j["alerts"] = as;
  j["health"] = hs;
  j["cleanings"] = cs;
  if (p.manifest_part) {
    std::string hex;
    for (auto b : p.manifest_part->bytes) hex += hex32(b).substr(6);
    j["manifest_part"] = {
        {"index", p.manifest_part->index}, {"count", p.manifest_part->count}, {"bytes", hex}};
  }
  if (p.manifest) j["manifest"] = manifest_to_json(*p.manifest);
  j["skipped_sections"] = p.skipped_sections;
  return j;
}

inline std::string to_hex(const std::vector<std::uint8_t>& b) {
  static const char* d = "0123456789abcdef";
  std::string s;
  for (auto x : b) s += d[x >> 4], s += d[x & 15];
  return s;
}
inline std::vector<std::uint8_t> from_hex(const std::string& s) {
  if (s.size() % 2) throw std::runtime_error("odd hex length");
  std::vector<std::uint8_t> b;
  for (std::size_t i = 0; i < s.size(); i += 2)
    b.push_back(std::uint8_t(std::stoul(s.substr(i, 2), nullptr, 16)));
  return b;
}

// Indented JSON with arrays of numbers, strings and nulls kept on one line.
inline std::string pretty(const json& j, int indent = 0) {
  const std::string pad(std::size_t(indent + 1), ' '), end_pad(std::size_t(indent), ' ');
  if (j.is_object()) {
    if (j.empty()) return "{}";
    std::string s = "{\n";
    bool first = true;
    for (auto& [k, v] : j.items()) {
      s += (first ? "" : ",\n") + pad + json(k).dump() + ": " + pretty(v, indent + 1);
      first = false;
    }
    return s + "\n" + end_pad + "}";
  }
  if (j.is_array()) {
    bool flat = std::all_of(j.begin(), j.end(), [](const json& x) { return x.is_primitive(); });
    if (flat) {
      std::string s = "[";
      for (std::size_t i = 0; i < j.size(); ++i) s += (i ? ", " : "") + j[i].dump();
      return s + "]";
    }
    std::string s = "[\n";
    for (std::size_t i = 0; i < j.size(); ++i)
      s += (i ? ",\n" : "") + pad + pretty(j[i], indent + 1);
    return s + "\n" + end_pad + "]";
  }
  return j.dump();
}

inline json read_json(const std::string& path) {
  std::ifstream in(path);
  if (!in) throw std::runtime_error("cannot read " + path);
  return json::parse(in);
}

}  // namespace codec_json
