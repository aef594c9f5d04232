// bench_codec: the compact telemetry codec against the field's methods, all
// measured in one run on the same windows. Prints one table and PASS/FAIL
// against the targets of issue 5. Usage: bench_codec [--runs N] [--co2 PATH]
//
// Data
//  (a) generated station day (invented demo data, Lake Hollin): 2024-06-01 UTC,
//      4 channels sampled every 60 s in 600 s windows (144 windows, 5760 slots):
//        chl  chlorophyll-a  0.01 ug/L: 4.0 + 1.5 cos(2 pi (h - 4) / 24), noise s.d. 0.05
//        pc   phycocyanin    0.01 ug/L: bloom rise 1.0 + 11 / (1 + exp(-(h - 14) / 2)), s.d. 0.03
//        pe   phycoerythrin  0.01 ug/L: 0.8 + 0.2 sin(2 pi h / 24), noise s.d. 0.02
//        temp water temp.   0.001 Cel: 18.5 + 0.8 sin(2 pi (h - 9) / 24), noise s.d. 0.003
//      each slot missing with probability 0.01 (flag 9, reason no_reply); 3 spikes per
//      channel (value + 40 s.d., flag 4, reason spike) and 2 suspect slots (flag 3).
//  (b) a real public series shipped in Debian: the weekly Mauna Loa CO2 record
//      1958-2001 (Keeling and Whorf, SIO; 2284 weeks, 59 missing), file co2.csv of
//      package python3-statsmodels (statsmodels/datasets/co2). One channel, 0.1 ppm,
//      weekly slots in 10-week windows; dates moved back 2 days onto the UTC week grid
//      (the codec stores no per-sample times, only slots).
//
// Rows
//  tarn 1 w/p, tarn 6 w/p : this codec, 1 and 6 windows per packet, all-in (header,
//                           flags, reasons, statistics, CRC).
//  tarn stats-only        : statistics-only packets, 1 window per packet.
//  JSON / CBOR / MsgPack  : one message per window through nlohmann/json: station,
//                           start, flags bits, per channel name, values (null when
//                           missing), flags, non-zero reasons and the statistics.
//  Gorilla                : Pelkonen et al., "Gorilla: a fast, scalable, in-memory time
//                           series database", VLDB 2015, section 4.1: delta-of-delta
//                           timestamps and XOR-coded float64 values, one block per
//                           channel per 6 windows. Values and times only: no flags, no
//                           statistics, no integrity check (this favours Gorilla).
//  entropy bound          : per channel, order-0 empirical entropy of the first
//                           differences of the quantised present values, plus the
//                           order-0 entropy of the flags, over the whole series.
// bytes/sample divides by slots (missing slots included). Speeds: samples (slots) per
// second on one core, median of --runs runs.
#include <algorithm>
#include <atomic>
#include <chrono>
#include <cmath>
#include <cstdio>
#include <cstring>
#include <fstream>
#include <functional>
#include <map>
#include <nlohmann/json.hpp>
#include <optional>
#include <random>
#include <sstream>
#include <string>
#include <vector>

#include "codec/bit_io.h"
#include "codec/decoder.h"
#include "codec/encoder.h"

using namespace tarn::codec;
using nlohmann::json;

namespace {

constexpr std::uint32_t kNoReply = 1u << 0;  // config/settings/reasons.h
constexpr std::uint32_t kSpike = 1u << 11;
constexpr std::uint32_t kRateOfChange = 1u << 12;

struct Dataset {
  std::string name;
  Manifest manifest;
  std::vector<Window> windows;
  std::size_t slots() const {
    std::size_t n = 0;
    for (auto& w : windows) n += std::size_t(w.slots) * w.channels.size();
    return n;
  }
};

void finish_window(Window& w, const Manifest& m) {
  for (std::size_t c = 0; c < w.channels.size(); ++c) {
    auto& ch = w.channels[c];
    for (auto& v : ch.values)
      if (v) v = double(std::llround(*v / m.channels[c].resolution)) * m.channels[c].resolution;
    ch.stats = summarise(ch, w.start, m.period_s);
  }
}

Dataset generated_day() {
  Dataset d;
  d.name = "generated day";
  Manifest& m = d.manifest;
  m.station = "hollin-buoy-1";
  m.period_s = 60;
  m.window_s = 600;
  m.channels = {
      {"chl", "chlorophyll-a", "ug/L", 0.01, "demo fluorometer A", std::nullopt, "", "", ""},
      {"pc", "phycocyanin", "ug/L", 0.01, "demo fluorometer B", std::nullopt, "", "", ""},
      {"pe", "phycoerythrin", "ug/L", 0.01, "demo fluorometer B", std::nullopt, "", "", ""},
      {"temp", "water temperature", "Cel", 0.001, "demo thermistor", std::nullopt, "", "", ""}};
  const std::int64_t day = 1717200000;  // 2024-06-01T00:00:00Z
  const double sd[4] = {0.05, 0.03, 0.02, 0.003};
  std::mt19937_64 rng(20240601);
  std::normal_distribution<double> gauss(0, 1);
  std::uniform_real_distribution<double> u(0, 1);
  const double pi = std::acos(-1.0);
  auto level = [&](int c, double h) {
    switch (c) {
      case 0:
        return 4.0 + 1.5 * std::cos(2 * pi * (h - 4) / 24);
      case 1:
        return 1.0 + 11.0 / (1 + std::exp(-(h - 14) / 2));
      case 2:
        return 0.8 + 0.2 * std::sin(2 * pi * h / 24);
      default:
        return 18.5 + 0.8 * std::sin(2 * pi * (h - 9) / 24);
    }
  };
  // Fixed slots (of 1440) for the spikes and suspect samples of each channel.
  std::vector<std::vector<int>> spikes(4), suspects(4);
  for (int c = 0; c < 4; ++c) {
    for (int k = 0; k < 3; ++k) spikes[c].push_back(int(rng() % 1440));
    for (int k = 0; k < 2; ++k) suspects[c].push_back(int(rng() % 1440));
  }
  for (int wi = 0; wi < 144; ++wi) {
    Window w;
    w.start = day + wi * 600;
    w.slots = 10;
    w.channels.resize(4);
    for (int c = 0; c < 4; ++c) {
      auto& ch = w.channels[c];
      ch.reasons.assign(10, 0);
      for (int i = 0; i < 10; ++i) {
        int slot = wi * 10 + i;
        double h = slot / 60.0;
        double v = level(c, h) + sd[c] * gauss(rng);
        Flag f = Flag::pass;
        if (std::count(spikes[c].begin(), spikes[c].end(), slot)) {
          v += 40 * sd[c];
          f = Flag::fail;
          ch.reasons[i] = kSpike;
        } else if (std::count(suspects[c].begin(), suspects[c].end(), slot)) {
          f = Flag::suspect;
          ch.reasons[i] = kRateOfChange;
        }
        if (u(rng) < 0.01) {
          f = Flag::missing;
          ch.reasons[i] = kNoReply;
        }
        ch.flags.push_back(f);
        ch.values.push_back(f == Flag::missing ? std::nullopt : std::optional<double>(v));
      }
    }
    finish_window(w, m);
    d.windows.push_back(std::move(w));
  }
  return d;
}

std::optional<Dataset> co2_weekly(const std::string& path) {
  std::ifstream in(path);
  if (!in) return std::nullopt;
  Dataset d;
  d.name = "Mauna Loa CO2";
  Manifest& m = d.manifest;
  m.station = "mauna-loa-weekly";
  m.period_s = 604800;
  m.window_s = 6048000;
  ManifestChannel co2;
  co2.name = "co2";
  co2.quantity = "CO2 mole fraction in dry air";
  co2.unit = "[ppm]";
  co2.resolution = 0.1;
  co2.instrument = "SIO analyser";
  m.channels = {co2};

  std::string line;
  std::getline(in, line);  // header: date,co2
  std::vector<std::pair<std::int64_t, std::optional<double>>> rows;
  while (std::getline(in, line)) {
    if (line.size() < 9) continue;
    int y = std::stoi(line.substr(0, 4)), mo = std::stoi(line.substr(4, 2)),
        da = std::stoi(line.substr(6, 2));
    // Days from civil date (proleptic Gregorian), H. Hinnant's algorithm.
    y -= mo <= 2;
    int era = (y >= 0 ? y : y - 399) / 400;
    int yoe = y - era * 400;
    int doy = (153 * (mo + (mo > 2 ? -3 : 9)) + 2) / 5 + da - 1;
    int doe = yoe * 365 + yoe / 4 - yoe / 100 + doy;
    std::int64_t days = std::int64_t(era) * 146097 + doe - 719468;
    std::string v = line.substr(9);
    rows.push_back(
        {days * 86400 - 2 * 86400, v.empty() ? std::nullopt : std::optional<double>(std::stod(v))});
  }
  if (rows.empty()) return std::nullopt;
  std::map<std::int64_t, Window> ws;
  for (auto& [t, v] : rows) {
    std::int64_t start = floor_div(t, m.window_s) * m.window_s;
    auto [it, fresh] = ws.try_emplace(start);
    Window& w = it->second;
    if (fresh) {
      w.start = start;
      w.slots = 10;
      w.channels.resize(1);
      w.channels[0].values.assign(10, std::nullopt);
      w.channels[0].flags.assign(10, Flag::missing);
      w.channels[0].reasons.assign(10, kNoReply);
    }
    int slot = int((t - start) / m.period_s);
    w.channels[0].values[slot] = v;
    w.channels[0].flags[slot] = v ? Flag::pass : Flag::missing;
    w.channels[0].reasons[slot] = v ? 0 : kNoReply;
  }
  for (auto& [_, w] : ws) {
    // Weeks before the first and after the last record are not observed: partial windows.
    if (&w == &ws.begin()->second || &w == &ws.rbegin()->second) w.partial = true;
    finish_window(w, m);
    d.windows.push_back(w);
  }
  return d;
}

// ---- timing -----------------------------------------------------------------

double median(std::vector<double> v) {
  std::sort(v.begin(), v.end());
  return v[v.size() / 2];
}

// Median seconds per call of fn over `runs` runs, each repeated to last >= 20 ms.
double time_per_call(int runs, const std::function<void()>& fn) {
  using clk = std::chrono::steady_clock;
  int reps = 1;
  while (true) {
    auto t0 = clk::now();
    for (int i = 0; i < reps; ++i) fn();
    double s = std::chrono::duration<double>(clk::now() - t0).count();
    if (s > 0.02) break;
    reps *= 2;
  }
  std::vector<double> per;
  for (int r = 0; r < runs; ++r) {
    auto t0 = clk::now();
    for (int i = 0; i < reps; ++i) fn();
    per.push_back(std::chrono::duration<double>(clk::now() - t0).count() / reps);
  }
  return median(per);
}

std::atomic<std::size_t> g_sink{0};  // keeps results alive

// ---- JSON family ----------------------------------------------------------------

json window_json(const Window& w, const Manifest& m) {
  json j;
  j["station"] = m.station;
  j["start"] = w.start;
  j["partial"] = w.partial;
  j["clock_unsynced"] = w.clock_unsynced;
  json chans = json::array();
  for (std::size_t c = 0; c < w.channels.size(); ++c) {
    const auto& ch = w.channels[c];
    json jc;
    jc["name"] = m.channels[c].name;
    json v = json::array(), f = json::array(), r = json::object();
    for (std::size_t i = 0; i < ch.values.size(); ++i) {
      v.push_back(ch.values[i] ? json(*ch.values[i]) : json(nullptr));
      f.push_back(int(ch.flags[i]));
      if (!ch.reasons.empty() && ch.reasons[i]) r[std::to_string(i)] = ch.reasons[i];
    }
    jc["values"] = std::move(v);
    jc["flags"] = std::move(f);
    if (!r.empty()) jc["reasons"] = std::move(r);
    const auto& s = ch.stats;
    json js;
    js["counts"] = s.counts;
    if (s.mean) {
      js["mean"] = *s.mean;
      js["min"] = *s.min;
      js["max"] = *s.max;
      js["sd"] = *s.sd;
      js["first_t"] = *s.first_t;
      js["last_t"] = *s.last_t;
    }
    jc["stats"] = std::move(js);
    chans.push_back(std::move(jc));
  }
  j["channels"] = std::move(chans);
  return j;
}

Window window_from_json(const json& j) {
  Window w;
  w.start = j.at("start").get<std::int64_t>();
  w.partial = j.at("partial").get<bool>();
  w.clock_unsynced = j.at("clock_unsynced").get<bool>();
  for (const auto& jc : j.at("channels")) {
    ChannelWindow ch;
    for (const auto& v : jc.at("values"))
      ch.values.push_back(v.is_null() ? std::nullopt : std::optional<double>(v.get<double>()));
    for (const auto& f : jc.at("flags")) ch.flags.push_back(Flag(f.get<int>()));
    if (jc.contains("reasons")) {
      ch.reasons.assign(ch.values.size(), 0);
      for (auto& [k, v] : jc["reasons"].items()) ch.reasons[std::stoul(k)] = v.get<std::uint32_t>();
    }
    const auto& js = jc.at("stats");
    ch.stats.counts = js.at("counts").get<std::array<std::uint32_t, 5>>();
    if (js.contains("mean")) {
      ch.stats.mean = js["mean"].get<double>();
      ch.stats.min = js["min"].get<double>();
      ch.stats.max = js["max"].get<double>();
      ch.stats.sd = js["sd"].get<double>();
      ch.stats.first_t = js["first_t"].get<std::int64_t>();
      ch.stats.last_t = js["last_t"].get<std::int64_t>();
    }
    w.slots = std::uint32_t(ch.values.size());
    w.channels.push_back(std::move(ch));
  }
  return w;
}

// ---- Gorilla (Pelkonen et al. 2015, section 4.1) -----------------------------------

struct GorillaBlock {
  std::vector<std::uint8_t> bytes;
  std::size_t points = 0;
  unsigned delta_bits = 14;  // first time delta: 14 bits in the paper (2-hour blocks of seconds)
};

void gorilla_put(BitWriter& bw, std::uint64_t v, unsigned bits) {
  if (bits > 32) {
    bw.put(v >> 32, bits - 32);
    bw.put(v & 0xffffffffu, 32);
  } else {
    bw.put(v & (bits == 64 ? ~0ull : ((1ull << bits) - 1)), bits);
  }
}
std::uint64_t gorilla_get(BitReader& br, unsigned bits) {
  if (bits > 32) {
    std::uint64_t hi = br.get(bits - 32);
    return hi << 32 | br.get(32);
  }
  return br.get(bits);
}

GorillaBlock gorilla_encode(const std::vector<std::pair<std::int64_t, double>>& pts,
                            unsigned delta_bits) {
  GorillaBlock b;
  b.points = pts.size();
  b.delta_bits = delta_bits;
  BitWriter bw(b.bytes);
  if (pts.empty()) return b;
  gorilla_put(bw, std::uint64_t(pts[0].first), 64);  // block header time
  std::int64_t prev_t = pts[0].first, prev_delta = 0;
  std::uint64_t prev_v = 0;
  int prev_lead = -1, prev_trail = 0;
  for (std::size_t i = 0; i < pts.size(); ++i) {
    std::uint64_t v = std::bit_cast<std::uint64_t>(pts[i].second);
    if (i == 0) {
      gorilla_put(bw, 0, delta_bits);  // first delta from the header time: 0
      gorilla_put(bw, v, 64);
      prev_v = v;
      continue;
    }
    std::int64_t delta = pts[i].first - prev_t;
    std::int64_t dod = delta - prev_delta;
    if (i == 1) {
      gorilla_put(bw, std::uint64_t(delta), delta_bits);
    } else if (dod == 0) {
      bw.put(0, 1);
    } else if (dod >= -64 && dod <= 63) {  // the paper's ranges, as two's complement
      bw.put(0b10, 2), gorilla_put(bw, std::uint64_t(dod), 7);
    } else if (dod >= -256 && dod <= 255) {
      bw.put(0b110, 3), gorilla_put(bw, std::uint64_t(dod), 9);
    } else if (dod >= -2048 && dod <= 2047) {
      bw.put(0b1110, 4), gorilla_put(bw, std::uint64_t(dod), 12);
    } else {
      bw.put(0b1111, 4), gorilla_put(bw, std::uint64_t(dod), 32);
    }
    prev_delta = delta;
    prev_t = pts[i].first;
    std::uint64_t x = v ^ prev_v;
    prev_v = v;
    if (x == 0) {
      bw.put(0, 1);
      continue;
    }
    int lead = std::min(31, std::countl_zero(x)), trail = std::countr_zero(x);
    if (prev_lead >= 0 && lead >= prev_lead && trail >= prev_trail) {
      bw.put(0b10, 2);
      gorilla_put(bw, x >> prev_trail, unsigned(64 - prev_lead - prev_trail));
    } else {
      bw.put(0b11, 2);
      gorilla_put(bw, unsigned(lead), 5);
      int len = 64 - lead - trail;
      gorilla_put(bw, unsigned(len == 64 ? 0 : len), 6);
      gorilla_put(bw, x >> trail, unsigned(len));
      prev_lead = lead, prev_trail = trail;
    }
  }
  bw.finish();
  return b;
}

std::vector<std::pair<std::int64_t, double>> gorilla_decode(const GorillaBlock& b) {
  std::vector<std::pair<std::int64_t, double>> out;
  if (b.points == 0) return out;
  BitReader br(b.bytes);
  std::int64_t t = std::int64_t(gorilla_get(br, 64));
  std::int64_t delta = std::int64_t(gorilla_get(br, b.delta_bits));
  t += delta;
  std::uint64_t v = gorilla_get(br, 64);
  out.push_back({t, std::bit_cast<double>(v)});
  int lead = 0, trail = 0;
  auto sext = [](std::uint64_t x, unsigned bits) {
    return std::int64_t(x << (64 - bits)) >> (64 - bits);
  };
  for (std::size_t i = 1; i < b.points; ++i) {
    if (i == 1) {
      delta = std::int64_t(gorilla_get(br, b.delta_bits));
    } else if (br.get(1) == 0) {
    } else if (br.get(1) == 0) {
      delta += sext(br.get(7), 7);
    } else if (br.get(1) == 0) {
      delta += sext(br.get(9), 9);
    } else if (br.get(1) == 0) {
      delta += sext(br.get(12), 12);
    } else {
      delta += sext(br.get(32), 32);
    }
    t += delta;
    if (br.get(1)) {
      if (br.get(1)) {
        lead = int(br.get(5));
        int len = int(br.get(6));
        if (len == 0) len = 64;
        trail = 64 - lead - len;
      }
      v ^= gorilla_get(br, unsigned(64 - lead - trail)) << trail;
    }
    out.push_back({t, std::bit_cast<double>(v)});
  }
  return out;
}

// Present points of one channel over windows [w0, w1).
std::vector<std::pair<std::int64_t, double>> points(const Dataset& d, std::size_t c, std::size_t w0,
                                                    std::size_t w1) {
  std::vector<std::pair<std::int64_t, double>> p;
  for (std::size_t wi = w0; wi < w1; ++wi) {
    const Window& w = d.windows[wi];
    for (std::uint32_t i = 0; i < w.slots; ++i)
      if (w.channels[c].values[i])
        p.push_back({w.start + std::int64_t(i) * d.manifest.period_s, *w.channels[c].values[i]});
  }
  return p;
}

// ---- entropy bound ----------------------------------------------------------------

template <class K>
double entropy_bits(const std::map<K, std::size_t>& hist) {
  std::size_t n = 0;
  for (auto& [_, c] : hist) n += c;
  double bits = 0;
  for (auto& [_, c] : hist) bits -= double(c) * std::log2(double(c) / double(n));
  return bits;
}

struct Bound {
  double value_bits = 0, flag_bits = 0;
};

Bound entropy_bound(const Dataset& d) {
  Bound b;
  std::map<int, std::size_t> flags;
  for (std::size_t c = 0; c < d.manifest.channels.size(); ++c) {
    const double res = d.manifest.channels[c].resolution;
    std::map<std::int64_t, std::size_t> diffs;
    std::optional<std::int64_t> prev;
    for (const Window& w : d.windows)
      for (std::uint32_t i = 0; i < w.slots; ++i) {
        flags[int(w.channels[c].flags[i])]++;
        if (!w.channels[c].values[i]) continue;
        std::int64_t q = std::llround(*w.channels[c].values[i] / res);
        if (prev) diffs[q - *prev]++;
        prev = q;
      }
    b.value_bits += entropy_bits(diffs);
  }
  b.flag_bits = entropy_bits(flags);
  return b;
}

// ---- rows -------------------------------------------------------------------------

struct Row {
  std::string data, codec;
  double bytes_per_sample = 0;
  double enc_sps = 0, dec_sps = 0;  // 0: not measured
  std::string note;
};

struct TarnResult {
  std::vector<EncodedPacket> packets;
  double bytes = 0, windows_section_bytes = 0, max_packet = 0;
};

TarnResult tarn_encode(const Dataset& d, const CheckedManifest& cm, const EncodeOptions& o) {
  TarnResult r;
  auto ps = encode_windows(cm, d.windows, 1, o);
  if (!ps) {
    std::fprintf(stderr, "bench_codec: encode failed: %s\n", ps.error().message.c_str());
    std::exit(1);
  }
  r.packets = std::move(*ps);
  for (auto& p : r.packets) {
    r.bytes += double(p.bytes.size());
    r.max_packet = std::max(r.max_packet, double(p.bytes.size()));
    auto secs = list_sections(p.bytes);
    for (auto& s : *secs)
      if (s.type == std::uint8_t(SectionType::windows)) r.windows_section_bytes += double(s.length);
  }
  return r;
}

// Checks that decoding gives back the windows; exits on a mismatch (the bench only times
// codecs that round-trip).
void verify_tarn(const Dataset& d, const CheckedManifest& cm, const TarnResult& r) {
  std::size_t wi = 0;
  for (auto& p : r.packets) {
    auto dp = decode_packet(p.bytes, &cm);
    if (!dp) {
      std::fprintf(stderr, "bench_codec: decode failed: %s\n", dp.error().message.c_str());
      std::exit(1);
    }
    for (auto& w : dp->windows) {
      const Window& e = d.windows[wi++];
      for (std::size_t c = 0; c < e.channels.size(); ++c) {
        const auto& g = w.channels[c];
        const auto& x = e.channels[c];
        bool same = w.stats_only ? g.stats.counts == x.stats.counts
                                 : g.flags == x.flags && g.values == x.values;
        if (!same) {
          std::fprintf(stderr, "bench_codec: round trip mismatch, window %zu\n", wi - 1);
          std::exit(1);
        }
      }
    }
  }
}

void bench_dataset(const Dataset& d, int runs, std::vector<Row>& rows,
                   std::map<std::string, double>& figures) {
  const std::string tag = d.name;
  auto cm = check_manifest(d.manifest);
  if (!cm) {
    std::fprintf(stderr, "bench_codec: %s\n", cm.error().message.c_str());
    std::exit(1);
  }
  const double n = double(d.slots());

  for (std::size_t wpp : {std::size_t(1), std::size_t(6)}) {
    EncodeOptions o;
    o.windows_per_packet = wpp;
    TarnResult r = tarn_encode(d, *cm, o);
    verify_tarn(d, *cm, r);
    double enc = time_per_call(runs, [&] {
      auto ps = encode_windows(*cm, d.windows, 1, o);
      g_sink += ps->size();
    });
    double dec = time_per_call(runs, [&] {
      for (auto& p : r.packets) g_sink += decode_packet(p.bytes, &*cm)->windows.size();
    });
    std::string name = "tarn " + std::to_string(wpp) + " w/p";
    char note[96];
    std::snprintf(note, sizeof note, "%zu packets; windows sections %.3f B/sample",
                  r.packets.size(), r.windows_section_bytes / n);
    rows.push_back({tag, name, r.bytes / n, n / enc, n / dec, note});
    figures[tag + "/" + name] = r.bytes / n;
    figures[tag + "/" + name + "/enc"] = n / enc;
    figures[tag + "/" + name + "/dec"] = n / dec;
    figures[tag + "/" + name + "/values"] = r.windows_section_bytes / n;
  }
  {
    EncodeOptions o;
    o.windows_per_packet = 1;
    o.stats_only = true;
    TarnResult r = tarn_encode(d, *cm, o);
    verify_tarn(d, *cm, r);
    double enc = time_per_call(runs, [&] {
      auto ps = encode_windows(*cm, d.windows, 1, o);
      g_sink += ps->size();
    });
    double dec = time_per_call(runs, [&] {
      for (auto& p : r.packets) g_sink += decode_packet(p.bytes, &*cm)->windows.size();
    });
    char note[64];
    std::snprintf(note, sizeof note, "max %.0f B/packet", r.max_packet);
    rows.push_back({tag, "tarn stats-only", r.bytes / n, n / enc, n / dec, note});
    figures[tag + "/stats max"] = r.max_packet;
  }

  // JSON family: one message per window.
  struct Fmt {
    const char* name;
    std::function<std::vector<std::uint8_t>(const json&)> to;
    std::function<json(const std::vector<std::uint8_t>&)> from;
  };
  std::vector<Fmt> fmts = {
      {"compact JSON",
       [](const json& j) {
         std::string s = j.dump();
         return std::vector<std::uint8_t>(s.begin(), s.end());
       },
       [](const std::vector<std::uint8_t>& b) { return json::parse(b.begin(), b.end()); }},
      {"CBOR", [](const json& j) { return json::to_cbor(j); },
       [](const std::vector<std::uint8_t>& b) { return json::from_cbor(b); }},
      {"MessagePack", [](const json& j) { return json::to_msgpack(j); },
       [](const std::vector<std::uint8_t>& b) { return json::from_msgpack(b); }},
  };
  for (auto& f : fmts) {
    std::vector<std::vector<std::uint8_t>> msgs;
    double bytes = 0;
    for (auto& w : d.windows) {
      msgs.push_back(f.to(window_json(w, d.manifest)));
      bytes += double(msgs.back().size());
    }
    if (window_from_json(f.from(msgs[0])).channels[0].flags != d.windows[0].channels[0].flags) {
      std::fprintf(stderr, "bench_codec: %s round trip mismatch\n", f.name);
      std::exit(1);
    }
    double enc = time_per_call(runs, [&] {
      for (auto& w : d.windows) g_sink += f.to(window_json(w, d.manifest)).size();
    });
    double dec = time_per_call(runs, [&] {
      for (auto& m : msgs) g_sink += window_from_json(f.from(m)).slots;
    });
    rows.push_back({tag, f.name, bytes / n, n / enc, n / dec, ""});
    figures[tag + "/" + f.name] = bytes / n;
  }

  // Gorilla: one block per channel per 6 windows. The paper's 14-bit first delta cannot
  // hold a weekly period; such series get 27 bits.
  {
    const unsigned delta_bits = d.manifest.period_s < (1u << 13) ? 14 : 27;
    std::vector<GorillaBlock> blocks;
    double bytes = 0;
    auto encode_all = [&] {
      blocks.clear();
      for (std::size_t w0 = 0; w0 < d.windows.size(); w0 += 6)
        for (std::size_t c = 0; c < d.manifest.channels.size(); ++c)
          blocks.push_back(
              gorilla_encode(points(d, c, w0, std::min(w0 + 6, d.windows.size())), delta_bits));
    };
    encode_all();
    std::size_t bi = 0;
    for (std::size_t w0 = 0; w0 < d.windows.size(); w0 += 6)
      for (std::size_t c = 0; c < d.manifest.channels.size(); ++c, ++bi) {
        bytes += double(blocks[bi].bytes.size());
        auto back = gorilla_decode(blocks[bi]);
        auto want = points(d, c, w0, std::min(w0 + 6, d.windows.size()));
        if (back != want) {
          std::size_t k = 0;
          while (k < back.size() && k < want.size() && back[k] == want[k]) ++k;
          std::fprintf(stderr, "bench_codec: Gorilla round trip mismatch, block %zu point %zu\n",
                       bi, k);
          if (k < back.size() && k < want.size())
            std::fprintf(stderr, "got %lld %.17g want %lld %.17g (sizes %zu %zu)\n",
                         (long long)back[k].first, back[k].second, (long long)want[k].first,
                         want[k].second, back.size(), want.size());
          std::exit(1);
        }
      }
    double enc = time_per_call(runs, [&] {
      encode_all();
      g_sink += blocks.size();
    });
    double dec = time_per_call(runs, [&] {
      for (auto& b : blocks) g_sink += gorilla_decode(b).size();
    });
    rows.push_back({tag, "Gorilla", bytes / n, n / enc, n / dec, "values+times only"});
    figures[tag + "/Gorilla"] = bytes / n;
  }

  Bound b = entropy_bound(d);
  rows.push_back({tag, "entropy bound", (b.value_bits + b.flag_bits) / 8 / n, 0, 0,
                  "values " + std::to_string(b.value_bits / n).substr(0, 4) + " + flags " +
                      std::to_string(b.flag_bits / n).substr(0, 4) + " bit/sample"});
  figures[tag + "/bound"] = (b.value_bits + b.flag_bits) / 8 / n;
}

std::string find_co2(const std::string& given) {
  if (!given.empty()) return given;
  const char* paths[] = {"/usr/lib/python3/dist-packages/statsmodels/datasets/co2/co2.csv",
                         "/usr/share/statsmodels/datasets/co2/co2.csv"};
  for (const char* p : paths)
    if (std::ifstream(p)) return p;
  return "";
}

}  // namespace

int main(int argc, char** argv) {
  int runs = 7;
  std::string co2_path;
  for (int i = 1; i < argc; ++i) {
    std::string a = argv[i];
    if (a == "--runs" && i + 1 < argc) {
      runs = std::max(1, std::atoi(argv[++i]));
    } else if (a == "--co2" && i + 1 < argc) {
      co2_path = argv[++i];
    } else {
      std::fprintf(stderr, "usage: bench_codec [--runs N] [--co2 PATH]\n");
      return 64;
    }
  }
  std::vector<Row> rows;
  std::map<std::string, double> fig;
  Dataset day = generated_day();
  bench_dataset(day, runs, rows, fig);
  co2_path = find_co2(co2_path);
  auto co2 = co2_weekly(co2_path);
  if (co2)
    bench_dataset(*co2, runs, rows, fig);
  else
    std::printf("note: no CO2 file (install python3-statsmodels or pass --co2 PATH)\n");

  std::printf("codec benchmark, median of %d runs; generated day: %zu slots", runs, day.slots());
  if (co2)
    std::printf("; %s: %zu slots from %s", co2->name.c_str(), co2->slots(), co2_path.c_str());
  std::printf("\n\n%-14s %-16s %10s %9s %12s %12s  %s\n", "data", "codec", "B/sample", "x tarn6",
              "enc Msps", "dec Msps", "note");
  for (const Row& r : rows) {
    double ref = fig[r.data + "/tarn 6 w/p"];
    char enc[32] = "-", dec[32] = "-";
    if (r.enc_sps > 0) std::snprintf(enc, sizeof enc, "%.2f", r.enc_sps / 1e6);
    if (r.dec_sps > 0) std::snprintf(dec, sizeof dec, "%.2f", r.dec_sps / 1e6);
    std::printf("%-14s %-16s %10.3f %9.2f %12s %12s  %s\n", r.data.c_str(), r.codec.c_str(),
                r.bytes_per_sample, r.bytes_per_sample / ref, enc, dec, r.note.c_str());
  }

  const std::string g = day.name + "/";
  const double t6 = fig[g + "tarn 6 w/p"];
  const double values = fig[g + "tarn 6 w/p/values"];
  int failed = 0;
  auto target = [&](const char* what, double got, const char* cmp, double limit, bool ok) {
    std::printf("%s  %-52s %10.3f %s %g\n", ok ? "PASS" : "FAIL", what, got, cmp, limit);
    failed += !ok;
  };
  std::printf("\ntargets on the generated day:\n");
  target("6 windows/packet, bytes/sample all-in", t6, "<=", 1.0, t6 <= 1.0);
  target("CBOR / tarn 6 w/p", fig[g + "CBOR"] / t6, ">=", 10, fig[g + "CBOR"] / t6 >= 10);
  target("Gorilla / tarn 6 w/p", fig[g + "Gorilla"] / t6, ">=", 3, fig[g + "Gorilla"] / t6 >= 3);
  target("value stream (windows sections) / entropy bound", values / fig[g + "bound"], "<=", 1.3,
         values / fig[g + "bound"] <= 1.3);
  target("stats-only packet, 4 channels, largest bytes", fig[g + "stats max"], "<=", 51,
         fig[g + "stats max"] <= 51);
  target("encode 6 w/p, Msamples/s", fig[g + "tarn 6 w/p/enc"] / 1e6, ">=", 5,
         fig[g + "tarn 6 w/p/enc"] >= 5e6);
  target("decode 6 w/p, Msamples/s", fig[g + "tarn 6 w/p/dec"] / 1e6, ">=", 5,
         fig[g + "tarn 6 w/p/dec"] >= 5e6);
  std::printf("%d of 7 targets failed\n", failed);
  return failed ? 1 : 0;
}
