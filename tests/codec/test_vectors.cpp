// Test vectors of codec/vectors/: each NAME.hex holds packets (one hex line each), NAME.json
// the records they must decode to and how they were encoded. The test decodes and compares,
// then re-encodes the input records and compares byte for byte.
//
// The files are fixed; the generator below wrote them once and is kept to document how:
//   TARN_WRITE_VECTORS=1 test_codec "[.generate]"
// Rewriting them is a format change (a new format version), never a test fix.
#include <catch2/catch.hpp>

#include <cstdlib>
#include <filesystem>
#include <map>
#include <set>

#include "codec/bit_io.h"
#include "codec/crc32c.h"
#include "codec_json.h"
#include "codec_test_data.h"
#include "config/settings/reasons.h"

using namespace codec_json;
namespace fs = std::filesystem;
namespace reason = tarn::pipeline::reason;

namespace {

fs::path vectors_dir() {
  return fs::path(TARN_SOURCE_DIR) / "codec" / "vectors";
}

// ---- comparison ---------------------------------------------------------------------

// Structural equality with numbers equal to 1e-9 relative (decoded values are
// integer * resolution; the files hold the same grid values in short decimal form).
bool close(const json& a, const json& b, std::string path, std::string& why) {
  if (a.is_number() && b.is_number()) {
    double x = a.get<double>(), y = b.get<double>();
    if (std::fabs(x - y) <= 1e-9 * std::max(1.0, std::fabs(y))) return true;
    why = path + ": " + a.dump() + " != " + b.dump();
    return false;
  }
  if (a.type() != b.type()) {
    why = path + ": " + a.dump() + " != " + b.dump();
    return false;
  }
  if (a.is_object()) {
    if (a.size() != b.size()) {
      why = path + ": keys differ";
      return false;
    }
    for (auto& [k, v] : a.items())
      if (!b.contains(k) || !close(v, b[k], path + "/" + k, why)) {
        if (why.empty()) why = path + "/" + k + ": missing";
        return false;
      }
    return true;
  }
  if (a.is_array()) {
    if (a.size() != b.size()) {
      why = path + ": " + std::to_string(a.size()) + " != " + std::to_string(b.size()) + " items";
      return false;
    }
    for (std::size_t i = 0; i < a.size(); ++i)
      if (!close(a[i], b[i], path + "/" + std::to_string(i), why)) return false;
    return true;
  }
  if (a != b) why = path + ": " + a.dump() + " != " + b.dump();
  return a == b;
}

std::vector<std::string> read_lines(const fs::path& p) {
  std::ifstream in(p);
  std::vector<std::string> out;
  for (std::string l; std::getline(in, l);)
    if (!l.empty()) out.push_back(l);
  return out;
}

EncodeOptions options_from(const json& e) {
  EncodeOptions o;
  o.mtu = e.value("mtu", std::size_t(kMaxPacketBytes));
  o.windows_per_packet = e.value("windows_per_packet", std::size_t(6));
  o.stats_only = e.value("stats_only", false);
  o.with_reasons = e.value("with_reasons", true);
  return o;
}

// Re-encodes the vector's input; empty when the vector is decode-only.
std::optional<std::vector<std::string>> reencode(const json& v, const CheckedManifest& cm) {
  const json& e = v.at("encode");
  const std::string kind = e.at("kind");
  const std::uint64_t seq = e.at("first_sequence");
  std::vector<std::string> out;
  if (kind == "windows") {
    std::vector<Window> ws;
    for (auto& jw : v.at("input").at("windows")) ws.push_back(window_from_json(jw));
    auto ps = encode_windows(cm, ws, seq, options_from(e));
    REQUIRE(ps);
    for (auto& p : *ps) out.push_back(to_hex(p.bytes));
  } else if (kind == "alerts") {
    std::vector<AlertEvent> ev;
    for (auto& a : v.at("input").at("alerts")) ev.push_back(alert_from_json(a));
    auto p = encode_alerts(cm, ev, seq, e.value("clock_unsynced", false));
    REQUIRE(p);
    out.push_back(to_hex(*p));
  } else if (kind == "cleanings") {
    std::vector<CleaningRecord> cs;
    for (auto& c : v.at("input").at("cleanings")) cs.push_back(cleaning_from_json(c));
    auto p = encode_cleanings(cm, cs, seq, e.value("clock_unsynced", false));
    REQUIRE(p);
    out.push_back(to_hex(*p));
  } else if (kind == "health") {
    std::vector<HealthRecord> hs;
    for (auto& h : v.at("input").at("health")) hs.push_back(health_from_json(h));
    auto p = encode_health(cm, hs, seq, e.value("clock_unsynced", false));
    REQUIRE(p);
    out.push_back(to_hex(*p));
  } else if (kind == "manifest") {
    auto ps = encode_manifest(cm, seq, options_from(e).mtu);
    REQUIRE(ps);
    for (auto& p : *ps) out.push_back(to_hex(p.bytes));
  } else {
    return std::nullopt;
  }
  return out;
}

}  // namespace

TEST_CASE("test vectors decode to their JSON and re-encode byte for byte", "[vectors]") {
  std::vector<fs::path> files;
  for (auto& e : fs::directory_iterator(vectors_dir()))
    if (e.path().extension() == ".hex") files.push_back(e.path());
  std::sort(files.begin(), files.end());
  REQUIRE(files.size() >= 15);
  std::set<std::uint8_t> sections_seen;
  std::set<int> versions_seen;
  for (const fs::path& hex : files) {
    fs::path jpath = hex;
    jpath.replace_extension(".json");
    const json v = read_json(jpath.string());
    const Manifest m = manifest_from_json(read_json((vectors_dir() / v.at("manifest")).string()));
    const CheckedManifest cm = *check_manifest(m);
    const auto lines = read_lines(hex);
    const json& expected = v.at("packets");
    INFO(hex.filename().string());
    REQUIRE(lines.size() == expected.size());
    for (std::size_t i = 0; i < lines.size(); ++i) {
      auto bytes = from_hex(lines[i]);
      auto d = decode_packet(bytes, &cm);
      INFO("packet " << i << ": " << (d ? "" : d.error().message));
      REQUIRE(d);
      std::string why;
      INFO("decoded " << packet_to_json(*d).dump());
      CHECK(close(packet_to_json(*d), expected[i], "", why));
      INFO(why);
      CHECK(why.empty());
      for (auto& s : *list_sections(bytes)) sections_seen.insert(s.type);
      versions_seen.insert(bytes[0] >> 4);
    }
    if (auto again = reencode(v, cm)) CHECK(*again == lines);
  }
  // Every section type appears in some vector, and an unknown one too; both versions.
  for (std::uint8_t t = 1; t <= 7; ++t) CHECK(sections_seen.count(t));
  CHECK(std::any_of(sections_seen.begin(), sections_seen.end(), [](auto t) { return t > 7; }));
  CHECK(versions_seen == std::set<int>{1, 2});
}

TEST_CASE("the vectors' manifest hash is the CRC-32C of its canonical bytes", "[vectors]") {
  const Manifest m =
      manifest_from_json(read_json((vectors_dir() / "manifest_hollin.json").string()));
  // The test data's manifest (and the fuzz target's) is this one.
  CHECK(m == codec_test::hollin_manifest());
  auto bytes = canonical_bytes(m);
  CHECK(manifest_hash(m) == crc32c(bytes));
  CHECK(manifest_hash(m, 1) == crc32c(canonical_bytes(m, 1)));
  CHECK(manifest_hash(m, 1) != manifest_hash(m));
  // The canonical bytes start with the station name as a length-prefixed string.
  REQUIRE(bytes.size() > 14);
  CHECK(bytes[0] == 13);
  CHECK(std::string(bytes.begin() + 1, bytes.begin() + 14) == "hollin-buoy-1");
  // Version 2: period 60, window 600 (varint d8 04), then the station fields byte
  // (position and elevation: 3) and latitude 55.10 (the invented point) as a
  // little-endian IEEE 754 binary64: the nearest double to 55.1 is
  // 0x404b8ccccccccccd (Python 3: struct.pack('<d', 55.1).hex() ==
  // 'cdcccccccc8c4b40').
  REQUIRE(bytes.size() > 14 + 3 + 1 + 8);
  CHECK(bytes[14] == 60);
  CHECK(bytes[15] == 0xd8);
  CHECK(bytes[16] == 0x04);
  CHECK(bytes[17] == 3);
  const std::vector<std::uint8_t> lat(bytes.begin() + 18, bytes.begin() + 26);
  CHECK(lat == std::vector<std::uint8_t>{0xcd, 0xcc, 0xcc, 0xcc, 0xcc, 0x8c, 0x4b, 0x40});
  // Version 1 bytes go straight on to the channel count.
  auto v1 = canonical_bytes(m, 1);
  CHECK(v1[17] == 4);
  // The version 1 hash is the one the committed version 1 vectors carry.
  const json v = read_json((vectors_dir() / "v1_09_alerts.json").string());
  CHECK(v.at("packets").at(0).at("manifest_hash") == hex32(manifest_hash(m, 1)));
}

// ---- generator ------------------------------------------------------------------------

namespace {

struct Writer {
  Manifest m;
  CheckedManifest cm;
  std::string manifest_file;
  fs::path corpus = fs::path(TARN_SOURCE_DIR) / "tests/fuzz/corpus/codec_decode";

  void write(const std::string& name, const std::string& description, json encode, json input,
             const std::vector<std::vector<std::uint8_t>>& packets, json expected) {
    json v{{"description", description},
           {"manifest", manifest_file},
           {"encode", encode},
           {"input", input},
           {"packets", expected}};
    std::ofstream(vectors_dir() / (name + ".json")) << pretty(v) << "\n";
    std::ofstream hex(vectors_dir() / (name + ".hex"));
    for (std::size_t i = 0; i < packets.size(); ++i) {
      hex << to_hex(packets[i]) << "\n";
      std::ofstream(corpus / (name + "-" + std::to_string(i) + ".bin"), std::ios::binary)
          .write(reinterpret_cast<const char*>(packets[i].data()),
                 std::streamsize(packets[i].size()));
    }
  }
};

// Expected decoded form of a packet built from the encoder's input (not from decoding).
json expect_windows(const Writer& w, const std::vector<Window>& in, const EncodedPacket& p,
                    bool stats_only) {
  DecodedPacket d;
  d.header.sequence = p.sequence;
  d.header.manifest_hash = w.cm.hash;
  for (std::size_t i = p.first_window; i < p.first_window + p.window_count; ++i) {
    Window x = in[i];
    x.first_channel = std::uint16_t(p.first_channel);
    x.stats_only = stats_only;
    x.channels.assign(in[i].channels.begin() + std::ptrdiff_t(p.first_channel),
                      in[i].channels.begin() + std::ptrdiff_t(p.first_channel + p.channel_count));
    for (std::size_t c = 0; c < x.channels.size(); ++c) {
      auto& ch = x.channels[c];
      const double res = w.m.channels[p.first_channel + c].resolution;
      if (stats_only) {
        ch.values.clear(), ch.flags.clear(), ch.reasons.clear();
        for (auto* s : {&ch.stats.mean, &ch.stats.min, &ch.stats.max, &ch.stats.sd})
          if (*s) *s = on_grid(**s, res);
      } else {
        if (std::all_of(ch.reasons.begin(), ch.reasons.end(), [](auto r) { return r == 0; }))
          ch.reasons.clear();
        ch.stats = summarise(ch, x.start, w.m.period_s);
      }
    }
    d.header.clock_unsynced |= x.clock_unsynced;
    d.header.partial |= x.partial;
    d.windows.push_back(x);
  }
  return packet_to_json(d);
}

struct Scene {
  Writer& w;
  std::mt19937_64 rng{20240601};
  std::normal_distribution<double> gauss{0, 1};

  // One window of the demo station: levels per channel, noise s.d., then edits.
  Window window(std::int64_t start, std::array<double, 4> level,
                std::array<double, 4> sd = {0.05, 0.03, 0.02, 0.003}) {
    Window x;
    x.start = start;
    x.slots = w.m.slots_per_window();
    for (std::size_t c = 0; c < 4; ++c) {
      ChannelWindow ch;
      for (std::uint32_t i = 0; i < x.slots; ++i) {
        ch.values.push_back(on_grid(level[c] + sd[c] * gauss(rng), w.m.channels[c].resolution));
        ch.flags.push_back(Flag::pass);
      }
      ch.reasons.assign(x.slots, 0);
      x.channels.push_back(ch);
    }
    return x;
  }
  static void set(Window& x, std::size_t c, std::uint32_t slot, Flag f, std::uint32_t why) {
    x.channels[c].flags[slot] = f;
    x.channels[c].reasons[slot] = why;
    if (f == Flag::missing) x.channels[c].values[slot].reset();
  }
  void finish(std::vector<Window>& ws, bool keep_reasons = true) {
    for (auto& x : ws)
      for (auto& ch : x.channels) {
        if (!keep_reasons) ch.reasons.clear();
        ch.stats = summarise(ch, x.start, w.m.period_s);
      }
  }

  void windows_vector(const std::string& name, const std::string& description,
                      std::vector<Window> ws, EncodeOptions o, std::uint64_t seq) {
    finish(ws);
    auto ps = encode_windows(w.cm, ws, seq, o);
    REQUIRE(ps);
    json input{{"windows", json::array()}}, expected = json::array();
    for (auto& x : ws) input["windows"].push_back(window_to_json(x));
    std::vector<std::vector<std::uint8_t>> bytes;
    for (auto& p : *ps) {
      bytes.push_back(p.bytes);
      expected.push_back(expect_windows(w, ws, p, o.stats_only));
    }
    json enc{{"kind", "windows"},
             {"first_sequence", seq},
             {"mtu", o.mtu},
             {"windows_per_packet", o.windows_per_packet},
             {"stats_only", o.stats_only},
             {"with_reasons", o.with_reasons}};
    w.write(name, description, enc, input, bytes, expected);
  }
};

}  // namespace

TEST_CASE("write the test vectors", "[.generate]") {
  if (!std::getenv("TARN_WRITE_VECTORS")) {
    WARN("set TARN_WRITE_VECTORS=1 to rewrite codec/vectors/");
    return;
  }
  Writer w;
  w.m = manifest_from_json(read_json((vectors_dir() / "manifest_hollin.json").string()));
  w.cm = *check_manifest(w.m);
  w.manifest_file = "manifest_hollin.json";
  fs::create_directories(w.corpus);
  Scene s{w};
  const std::int64_t t0 = 1717243200;  // 2024-06-01T12:00:00Z
  const std::array<double, 4> noon{3.1, 6.8, 0.95, 19.2};

  {  // 01: an hour, 6 windows, the common case with a few flags.
    std::vector<Window> ws;
    for (int i = 0; i < 6; ++i) ws.push_back(s.window(t0 + i * 600, noon));
    Scene::set(ws[1], 0, 4, Flag::missing, reason::no_reply);
    Scene::set(ws[2], 1, 7, Flag::fail, reason::spike);
    ws[2].channels[1].values[7] = 9.9;
    Scene::set(ws[3], 2, 0, Flag::suspect, reason::rate_of_change);
    Scene::set(ws[4], 3, 2, Flag::not_evaluated, reason::warming_up);
    Scene::set(ws[4], 3, 3, Flag::not_evaluated, reason::warming_up);
    Scene::set(ws[5], 0, 9, Flag::missing, reason::garbled);
    s.windows_vector("v01_hour_six_windows",
                     "one hour: 6 windows x 4 channels, one spike (flag 4), a suspect slot, "
                     "two not-evaluated slots and two missing slots, with reason bits",
                     ws, {}, 1);
  }
  {  // 02: one channel all missing (instrument offline).
    std::vector<Window> ws{s.window(t0, noon)};
    for (std::uint32_t i = 0; i < 10; ++i) Scene::set(ws[0], 1, i, Flag::missing, reason::offline);
    s.windows_vector("v02_all_missing_channel",
                     "one window; channel pc offline for the whole window (all flag 9)", ws, {}, 7);
  }
  {  // 03: partial windows: start mid-window before clock sync, end truncated.
    std::vector<Window> ws{s.window(t0, noon), s.window(t0 + 600, noon)};
    ws[0].partial = true;
    ws[0].clock_unsynced = true;
    for (std::size_t c = 0; c < 4; ++c)
      for (std::uint32_t i = 0; i < 4; ++i) Scene::set(ws[0], c, i, Flag::missing, reason::offline);
    ws[1].partial = true;
    ws[1].slots = 6;
    for (auto& ch : ws[1].channels) {
      ch.values.resize(6), ch.flags.resize(6), ch.reasons.resize(6);
    }
    s.windows_vector("v03_partial_windows",
                     "two partial windows: the first began at slot 4 before the clock was "
                     "synchronised, the second ended after 6 of 10 slots",
                     ws, {}, 12);
  }
  {  // 04: negative values (blank-corrected fluorescence below zero, probe in ice).
    std::vector<Window> ws{s.window(t0, {-0.03, 0.01, -0.02, -1.5}, {0.02, 0.01, 0.01, 0.2})};
    s.windows_vector("v04_negative_values",
                     "negative values: chl and pe slightly below zero, temperature near -1.5 Cel",
                     ws, {}, 20);
  }
  {  // 05: MTU split into window groups and channel groups.
    std::vector<Window> ws;
    for (int i = 0; i < 6; ++i) ws.push_back(s.window(t0 + i * 600, noon, {0.4, 0.3, 0.2, 0.03}));
    Scene::set(ws[2], 3, 5, Flag::missing, reason::no_reply);
    EncodeOptions o;
    o.mtu = 48;
    s.windows_vector("v05_mtu_split_48",
                     "6 noisy windows under a 48-byte MTU: split into single windows and then "
                     "into groups of channels, each packet decodable alone",
                     ws, o, 30);
  }
  {  // 06: the largest MTU and many windows per packet, with gaps between windows.
    std::vector<Window> ws;
    for (int i = 0; i < 40; ++i) {
      std::int64_t start = t0 + i * 600 + (i >= 20 ? 3 * 600 : 0);  // 3 windows not sent
      ws.push_back(s.window(start, noon));
    }
    ws[7].channels[0].values[3] = 250.0;  // a jump that takes the escape code
    Scene::set(ws[7], 0, 3, Flag::fail, reason::spike | reason::gross_range_operator);
    EncodeOptions o;
    o.mtu = kMaxPacketBytes;
    o.windows_per_packet = 255;
    s.windows_vector("v06_largest_mtu_with_gaps",
                     "40 windows in one packet at the largest MTU, with a gap of 3 windows and "
                     "a 250 ug/L spike coded with the escape form",
                     ws, o, 40);
  }
  {  // 07: statistics only, one window: the smallest-link packet.
    std::vector<Window> ws{s.window(t0, noon)};
    Scene::set(ws[0], 2, 6, Flag::missing, reason::no_reply);
    EncodeOptions o;
    o.stats_only = true;
    o.windows_per_packet = 1;
    s.windows_vector("v07_stats_only_one_window",
                     "statistics-only packet for one window of 4 channels", ws, o, 50);
  }
  {  // 08: statistics only, 6 windows with flags, a single passed sample and an empty channel.
    std::vector<Window> ws;
    for (int i = 0; i < 6; ++i) ws.push_back(s.window(t0 + i * 600, noon));
    for (std::uint32_t i = 0; i < 10; ++i) {
      if (i != 5) Scene::set(ws[1], 0, i, Flag::suspect, reason::flat_line);
      Scene::set(ws[2], 1, i, Flag::missing, reason::offline);
    }
    Scene::set(ws[4], 3, 0, Flag::fail, reason::gross_range_sensor);
    ws[5].partial = true;
    ws[5].slots = 3;
    for (auto& ch : ws[5].channels) ch.values.resize(3), ch.flags.resize(3), ch.reasons.resize(3);
    EncodeOptions o;
    o.stats_only = true;
    s.windows_vector("v08_stats_only_six_windows",
                     "statistics-only, 6 windows: one channel with a single passed sample, one "
                     "with none, a failed slot and a 3-slot partial window",
                     ws, o, 51);
  }
  {  // 09: alert events.
    std::vector<AlertEvent> ev{
        {1, 2, "warning", 1, 31.42, t0 + 600, "pc-bloom", AlertKind::change, StaleCause::none},
        {0, 1, "watch", 0, 12.5, t0 + 600, "chl-high", AlertKind::change, StaleCause::none},
        {1, 2, "warning", 2, 31.42, t0 + 4200, "pc-bloom", AlertKind::change, StaleCause::none},
        {1, 2, "warning", 2, 33.07, t0 + 6000, "pc-bloom", AlertKind::change, StaleCause::none}};
    ev[2].kind = AlertKind::stale;
    ev[2].cause = StaleCause::instrument_offline;
    ev[3].kind = AlertKind::resumed;
    auto p = encode_alerts(w.cm, ev, 60, false);
    REQUIRE(p);
    json input{{"alerts", json::array()}}, exp = json::array();
    DecodedPacket d;
    d.header.sequence = 60;
    d.header.manifest_hash = w.cm.hash;
    for (auto& e : ev) {
      input["alerts"].push_back(alert_to_json(e));
      AlertEvent q = e;
      q.statistic = on_grid(e.statistic, w.m.channels[e.channel].resolution);
      d.alerts.push_back(q);
    }
    exp.push_back(packet_to_json(d));
    w.write("v09_alerts",
            "two alert level changes raised on one window; the warning goes stale six windows "
            "later (instrument offline) and resumes three windows after that",
            json{{"kind", "alerts"}, {"first_sequence", 60}, {"clock_unsynced", false}}, input,
            {*p}, exp);
  }
  {  // 10, 11: the manifest in one packet, and split under a 48-byte MTU.
    for (std::size_t mtu : {std::size_t(kMaxPacketBytes), std::size_t(48)}) {
      auto ps = encode_manifest(w.cm, 70, mtu);
      REQUIRE(ps);
      const auto bytes = canonical_bytes(w.m);
      // Part sizes by the rule of FORMAT.md §5.2, worked out here independently.
      std::vector<std::size_t> cuts;
      for (std::size_t count = 1;;) {
        cuts.assign(1, 0);
        for (std::size_t i = 0; cuts.back() < bytes.size(); ++i) {
          std::size_t over = 1 + 4 + varint_size(70 + i) + 1 + varint_size(mtu) + varint_size(i) +
                             varint_size(count) + 4;
          cuts.push_back(std::min(bytes.size(), cuts.back() + mtu - over));
        }
        if (cuts.size() - 1 <= count) break;
        count = cuts.size() - 1;
      }
      REQUIRE(ps->size() == cuts.size() - 1);
      json exp = json::array();
      std::vector<std::vector<std::uint8_t>> pk;
      for (std::size_t i = 0; i < ps->size(); ++i) {
        DecodedPacket d;
        d.header.sequence = 70 + i;
        d.header.manifest_hash = w.cm.hash;
        ManifestPart part;
        part.index = std::uint32_t(i);
        part.count = std::uint32_t(ps->size());
        part.bytes.assign(bytes.begin() + std::ptrdiff_t(cuts[i]),
                          bytes.begin() + std::ptrdiff_t(cuts[i + 1]));
        d.manifest_part = part;
        if (ps->size() == 1) d.manifest = w.m;
        exp.push_back(packet_to_json(d));
        pk.push_back((*ps)[i].bytes);
      }
      bool one = mtu == kMaxPacketBytes;
      w.write(one ? "v10_manifest" : "v11_manifest_split_48",
              one ? "the manifest of hollin-buoy-1 in one packet"
                  : "the manifest split into parts under a 48-byte MTU",
              json{{"kind", "manifest"}, {"first_sequence", 70}, {"mtu", mtu}},
              json{{"manifest", manifest_to_json(w.m)}}, pk, exp);
    }
  }
  {  // 12: health.
    std::vector<HealthRecord> hs{{t0, 41.3, 5120, 12.61}, {t0 + 3600, -4.2, {}, 11.874}};
    auto p = encode_health(w.cm, hs, 80, false);
    REQUIRE(p);
    DecodedPacket d;
    d.header.sequence = 80;
    d.header.manifest_hash = w.cm.hash;
    json input{{"health", json::array()}};
    for (auto h : hs) {
      input["health"].push_back(health_to_json(h));
      if (h.board_temp_c) h.board_temp_c = on_grid(*h.board_temp_c, 0.1);
      if (h.supply_v) h.supply_v = on_grid(*h.supply_v, 0.001);
      d.health.push_back(h);
    }
    w.write("v12_health", "two station health records (board temperature, disk, supply)",
            json{{"kind", "health"}, {"first_sequence", 80}, {"clock_unsynced", false}}, input,
            {*p}, json::array({packet_to_json(d)}));
  }
  {  // 13: a section type from a later format revision, skipped by length.
    std::vector<Window> ws{s.window(t0, noon)};
    s.finish(ws);
    auto ps = encode_windows(w.cm, ws, 90, {});
    REQUIRE(ps);
    std::vector<std::uint8_t> p(ps->front().bytes.begin(), ps->front().bytes.end() - 4);
    std::vector<std::uint8_t> extra{0x41, 0x03, 0xde, 0xad, 0x01};
    p.insert(p.end(), extra.begin(), extra.end());
    put_u32le(p, crc32c(p));
    json exp = expect_windows(w, ws, ps->front(), false);
    exp["skipped_sections"] = json::array({0x41});
    json input{{"windows", json::array({window_to_json(ws[0])})}};
    w.write("v13_unknown_section",
            "a windows packet followed by a section of unknown type 0x41 (3 bytes) that a "
            "decoder skips by its length; decode-only",
            json{{"kind", "none"}, {"first_sequence", 90}}, input, {p}, json::array({exp}));
  }
  {  // 14: cleaning records around a maintenance visit.
    std::vector<CleaningRecord> cs{{0, t0 + 3600, t0 + 5100, 4.8174, 3.2049, 5, 5},
                                   {1, t0 + 3600, t0 + 5100, 7.1, std::nullopt, 5, 0},
                                   {3, t0 + 3590, t0 + 3590, std::nullopt, std::nullopt, 0, 0}};
    auto p = encode_cleanings(w.cm, cs, 100, false);
    REQUIRE(p);
    DecodedPacket d;
    d.header.sequence = 100;
    d.header.manifest_hash = w.cm.hash;
    json input{{"cleanings", json::array()}};
    for (auto c : cs) {
      input["cleanings"].push_back(cleaning_to_json(c));
      const double res = w.m.channels[c.channel].resolution;
      if (c.before) c.before = on_grid(*c.before, res);
      if (c.after) c.after = on_grid(*c.after, res);
      d.cleanings.push_back(c);
    }
    w.write("v14_cleanings",
            "cleaning records: chl before and after, pc before only (no reading after), temp "
            "with neither and a maintenance of no length",
            json{{"kind", "cleanings"}, {"first_sequence", 100}, {"clock_unsynced", false}}, input,
            {*p}, json::array({packet_to_json(d)}));
  }
  {  // 15: statistics over not-evaluated samples (a channel in warm-up, no QC).
    std::vector<Window> ws{s.window(t0, noon), s.window(t0 + 600, noon)};
    for (std::uint32_t i = 0; i < 10; ++i) Scene::set(ws[0], 3, i, Flag::not_evaluated, 0);
    for (std::uint32_t i = 0; i < 10; ++i)
      Scene::set(ws[1], 0, i, i < 4 ? Flag::not_evaluated : Flag::suspect,
                 i < 4 ? reason::warming_up : reason::spike);
    Scene::set(ws[1], 1, 2, Flag::not_evaluated, reason::warming_up);  // with passed: basis used
    EncodeOptions o;
    o.stats_only = true;
    s.windows_vector("v15_stats_not_evaluated",
                     "statistics-only, 2 windows: temp all not evaluated, chl with 4 not "
                     "evaluated and 6 suspect slots (both basis not_evaluated), pc with one "
                     "not-evaluated slot among passed ones (basis used)",
                     ws, o, 110);
  }
}

TEST_CASE("a decoder written from FORMAT.md alone agrees on every vector", "[vectors]") {
  // codec/reference_decoder.py shares no code with the C++ codec; it prints
  // "N passed, M failed" and exits 0 only when every vector packet matches its JSON.
  const std::string src = TARN_SOURCE_DIR;
  if (!fs::exists("/usr/bin/python3")) {
    WARN("no /usr/bin/python3: reference decoder not run");
    return;
  }
  const std::string cmd = "/usr/bin/python3 " + src + "/codec/reference_decoder.py --check " + src +
                          "/codec/vectors > /dev/null";
  CHECK(std::system(cmd.c_str()) == 0);
}
