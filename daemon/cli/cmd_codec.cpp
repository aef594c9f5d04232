// Codec tools for integrators and tests (codec/FORMAT.md):
//   tarn encode   --manifest M.json [--windows-per-packet N] [--mtu BYTES] [--stats-only]
//   tarn decode   --manifest M.json [--hex] [--records samples|windows] [--format jsonl|csv]
//   [FILE...] tarn manifest --config FILE [--hex] [--mtu BYTES]
// Samples are JSON Lines {"t": <unix s>, "ch": "<name>", "v": <number|null>, "f": <flag>},
// with "r": <reason bits> when non-zero.
#include <cmath>
#include <cstdio>
#include <fstream>
#include <iostream>
#include <map>
#include <nlohmann/json.hpp>
#include <sstream>

#include "codec/decoder.h"
#include "codec/encoder.h"
#include "daemon/cli/command.h"
#include "daemon/core/config_check.h"
#include "daemon/core/manifest_json.h"

namespace {

namespace cli = tarn::cli;
namespace codec = tarn::codec;
using nlohmann::json;

// ---- shared -------------------------------------------------------------------------

int usage(const cli::Options& o, const char* text) {
  const bool help = o.has("help");
  std::fprintf(help ? stdout : stderr, "%s%s%s", o.error().c_str(), o.error().empty() ? "" : "\n",
               text);
  return help ? 0 : cli::ex_usage;
}

bool parse_size(const std::string& s, std::size_t lo, std::size_t hi, std::size_t& out) {
  try {
    std::size_t pos = 0;
    unsigned long long v = std::stoull(s, &pos);
    if (pos != s.size() || v < lo || v > hi) return false;
    out = std::size_t(v);
    return true;
  } catch (...) {
    return false;
  }
}

std::string to_hex(const std::vector<std::uint8_t>& b) {
  static const char* d = "0123456789abcdef";
  std::string s;
  s.reserve(b.size() * 2);
  for (auto x : b) s += d[x >> 4], s += d[x & 15];
  return s;
}

// Decimal places that print multiples of `res` exactly (0.01 -> 2, 0.5 -> 1, 5 -> 0).
int decimals_of(double res) {
  for (int d = 0; d < 12; ++d) {
    double scaled = res * std::pow(10.0, d);
    if (std::fabs(scaled - std::round(scaled)) < 1e-9 * scaled) return d;
  }
  return 12;
}

std::string number(double v, int decimals) {
  char buf[64];
  std::snprintf(buf, sizeof buf, "%.*f", decimals, v);
  return buf;
}

// ---- encode -------------------------------------------------------------------------

const char* kEncodeUsage =
    "usage: tarn encode --manifest M.json [--windows-per-packet N] [--mtu BYTES] [--stats-only]\n"
    "                   [--first-sequence N] [--no-reasons]\n"
    "Reads samples as JSON Lines on stdin, one object per sample:\n"
    "  {\"t\": <unix seconds>, \"ch\": \"<channel>\", \"v\": <number or null>, \"f\": "
    "<1|2|3|4|9>}\n"
    "(optional \"r\": reason bits; \"f\" defaults to 9 for null, else 2). Each sample goes to\n"
    "the slot holding t; slots without a sample are sent as missing (flag 9). Writes one\n"
    "packet per line as hex on stdout. Defaults: 6 windows per packet, MTU 65535, sequence 1.\n";

struct Sample {
  std::int64_t t;
  int channel;
  std::optional<double> v;
  codec::Flag f;
  std::uint32_t r;
  std::size_t line;
};

// Parses one input line; on error returns the message.
std::optional<std::string> parse_sample(const std::string& text, const codec::Manifest& m,
                                        std::size_t line, Sample& s) {
  json j;
  try {
    j = json::parse(text);
  } catch (const json::parse_error&) {
    return std::string("not a JSON object");
  }
  if (!j.is_object()) return std::string("not a JSON object");
  for (auto& [k, _] : j.items())
    if (k != "t" && k != "ch" && k != "v" && k != "f" && k != "r")
      return "unknown key \"" + k + "\"; allowed: t, ch, v, f, r";
  if (!j.contains("t") || !j["t"].is_number_integer())
    return std::string("\"t\" must be an integer number of Unix seconds");
  if (!j.contains("ch") || !j["ch"].is_string())
    return std::string("\"ch\" must be the name of a manifest channel");
  s.t = j["t"].get<std::int64_t>();
  s.channel = codec::channel_index(m, j["ch"].get<std::string>());
  if (s.channel < 0) {
    std::string names;
    for (auto& c : m.channels) names += (names.empty() ? "" : ", ") + c.name;
    return "channel \"" + j["ch"].get<std::string>() + "\" is not in the manifest (" + names + ")";
  }
  if (!j.contains("v") || !(j["v"].is_number() || j["v"].is_null()))
    return std::string("\"v\" must be a number or null");
  if (j["v"].is_number()) s.v = j["v"].get<double>();
  int f = s.v ? 2 : 9;
  if (j.contains("f")) {
    if (!j["f"].is_number_integer() || !codec::is_valid_flag(std::uint8_t(j["f"].get<int>())) ||
        j["f"].get<int>() > 9)
      return std::string("\"f\" must be a QARTOD flag: 1, 2, 3, 4 or 9");
    f = j["f"].get<int>();
  }
  s.f = codec::Flag(f);
  if (s.v.has_value() != (s.f != codec::Flag::missing))
    return std::string("a sample has a value exactly when its flag is not 9");
  s.r = 0;
  if (j.contains("r")) {
    if (!j["r"].is_number_unsigned() || j["r"].get<std::uint64_t>() > UINT32_MAX)
      return std::string("\"r\" must be reason bits, an integer 0..4294967295");
    s.r = j["r"].get<std::uint32_t>();
  }
  s.line = line;
  return std::nullopt;
}

// Builds windows from the samples: every manifest channel in every window that has a sample.
std::optional<std::string> build_windows(const std::vector<Sample>& samples,
                                         const codec::Manifest& m,
                                         std::vector<codec::Window>& out) {
  const std::uint32_t n = m.slots_per_window();
  std::map<std::int64_t, codec::Window> by_start;
  std::map<std::pair<std::int64_t, int>, std::size_t> seen;  // (slot time, channel) -> line
  for (const Sample& s : samples) {
    const std::int64_t start = codec::floor_div(s.t, m.window_s) * m.window_s;
    const std::uint32_t slot = std::uint32_t((s.t - start) / m.period_s);
    const std::int64_t slot_t = start + std::int64_t(slot) * m.period_s;
    auto [it, fresh] = seen.try_emplace({slot_t, s.channel}, s.line);
    if (!fresh)
      return "stdin:" + std::to_string(s.line) + ": second sample for channel \"" +
             m.channels[std::size_t(s.channel)].name +
             "\" in the slot at t=" + std::to_string(slot_t) + " (first on line " +
             std::to_string(it->second) + ")";
    auto [wit, wfresh] = by_start.try_emplace(start);
    codec::Window& w = wit->second;
    if (wfresh) {
      w.start = start;
      w.slots = n;
      w.channels.resize(m.channels.size());
      for (auto& c : w.channels) {
        c.values.assign(n, std::nullopt);
        c.flags.assign(n, codec::Flag::missing);
        c.reasons.assign(n, 0);
      }
    }
    codec::ChannelWindow& c = w.channels[std::size_t(s.channel)];
    c.values[slot] = s.v;
    c.flags[slot] = s.f;
    c.reasons[slot] = s.r;
  }
  if (by_start.empty()) return std::nullopt;
  // The stream may begin and end inside a window: those windows are partial, and the
  // last one ends after its last sample.
  auto slot_range = [&](const codec::Window& w, bool first) {
    std::uint32_t best = first ? n : 0;
    for (std::uint32_t i = 0; i < n; ++i)
      for (std::size_t c = 0; c < w.channels.size(); ++c)
        if (seen.count({w.start + std::int64_t(i) * m.period_s, int(c)}))
          best = first ? std::min(best, i) : std::max(best, i + 1);
    return best;
  };
  codec::Window& first = by_start.begin()->second;
  if (slot_range(first, true) > 0) first.partial = true;
  codec::Window& last = by_start.rbegin()->second;
  if (std::uint32_t end = slot_range(last, false); end < n) {
    last.partial = true;
    last.slots = end;
    for (auto& c : last.channels) c.values.resize(end), c.flags.resize(end), c.reasons.resize(end);
  }
  for (auto& [_, w] : by_start) {
    for (auto& c : w.channels) c.stats = codec::summarise(c, w.start, m.period_s);
    out.push_back(std::move(w));
  }
  return std::nullopt;
}

int run_encode(const cli::Args& args) {
  cli::Options o(args, {"manifest", "windows-per-packet", "mtu", "first-sequence"},
                 {"help", "stats-only", "no-reasons"});
  if (!o.ok() || o.has("help") || !o.has("manifest") || !o.positional().empty())
    return usage(o, kEncodeUsage);
  codec::EncodeOptions opts;
  opts.stats_only = o.has("stats-only");
  opts.with_reasons = !o.has("no-reasons");
  std::size_t seq = 1;
  if (!parse_size(o.get("windows-per-packet", "6"), 1, codec::kMaxWindowsPerSection,
                  opts.windows_per_packet)) {
    std::fprintf(stderr, "tarn encode: --windows-per-packet must be 1..255\n");
    return cli::ex_usage;
  }
  if (!parse_size(o.get("mtu", "65535"), codec::kMinPacketBytes, codec::kMaxPacketBytes,
                  opts.mtu)) {
    std::fprintf(stderr, "tarn encode: --mtu must be %zu..%zu bytes\n", codec::kMinPacketBytes,
                 codec::kMaxPacketBytes);
    return cli::ex_usage;
  }
  if (!parse_size(o.get("first-sequence", "1"), 0, SIZE_MAX, seq)) {
    std::fprintf(stderr, "tarn encode: --first-sequence must be an unsigned integer\n");
    return cli::ex_usage;
  }
  auto m = tarn::daemon::load_manifest_file(o.get("manifest"));
  if (!m) {
    std::fprintf(stderr, "tarn encode: %s\n", m.error().message.c_str());
    return cli::ex_config;
  }
  auto cm = codec::check_manifest(*m);
  std::vector<Sample> samples;
  std::size_t line_no = 0, errors = 0;
  for (std::string line; std::getline(std::cin, line);) {
    ++line_no;
    if (line.find_first_not_of(" \t\r") == std::string::npos) continue;
    Sample s;
    if (auto e = parse_sample(line, *m, line_no, s)) {
      if (++errors <= 20) std::fprintf(stderr, "tarn encode: stdin:%zu: %s\n", line_no, e->c_str());
      continue;
    }
    samples.push_back(s);
  }
  std::vector<codec::Window> windows;
  if (errors == 0) {
    if (auto e = build_windows(samples, *m, windows)) {
      std::fprintf(stderr, "tarn encode: %s\n", e->c_str());
      ++errors;
    }
  }
  if (errors) {
    std::fprintf(stderr, "tarn encode: %zu bad input line%s; no packets written\n", errors,
                 errors == 1 ? "" : "s");
    return cli::ex_dataerr;
  }
  auto packets = codec::encode_windows(*cm, windows, seq, opts);
  if (!packets) {
    std::fprintf(stderr, "tarn encode: %s\n", packets.error().message.c_str());
    return cli::ex_dataerr;
  }
  for (const auto& p : *packets) std::printf("%s\n", to_hex(p.bytes).c_str());
  return cli::ex_ok;
}

// ---- decode -------------------------------------------------------------------------

const char* kDecodeUsage =
    "usage: tarn decode [--manifest M.json] [--hex] [--records samples|windows]\n"
    "                   [--format jsonl|csv] [FILE...]\n"
    "Reads packets from the FILEs (default: stdin): each file one binary packet, or with\n"
    "--hex one hex packet per line (the last word of the line, so \"topic hex\" works too).\n"
    "Writes samples {\"t\",\"ch\",\"v\",\"f\"[,\"r\"]} or window records; alert, health and\n"
    "cleaning packets give {\"alert\": ...} / {\"health\": ...} / {\"cleaning\": ...} lines in\n"
    "jsonl. Packets of format versions 1 and 2 are read. Manifest packets in\n"
    "the input are learned and used for the packets after them. A corrupt or foreign\n"
    "packet gives one error line naming it; decoding goes on; the exit code is then 65.\n";

class Decoding {
 public:
  Decoding(bool windows, bool csv) : windows_(windows), csv_(csv) {}
  // Known under both hashes: packets of format version 1 carry the version 1 hash.
  void add_manifest(const codec::Manifest& m) {
    auto cm = codec::check_manifest(m);
    if (!cm) return;
    known_.insert_or_assign(cm->hash_v1, *cm);
    known_.insert_or_assign(cm->hash, *cm);
  }
  bool knows_any() const { return !known_.empty(); }
  std::size_t errors() const { return errors_; }

  void packet(const std::string& where, const std::vector<std::uint8_t>& bytes) {
    auto h = codec::peek_header(bytes);
    if (!h) return fail(where, h.error().message);
    auto it = known_.find(h->manifest_hash);
    const codec::CheckedManifest* cm = it == known_.end() ? nullptr : &it->second;
    auto d = codec::decode_packet(bytes, cm);
    if (!d) {
      if (d.error().code == codec::Errc::manifest_mismatch && !cm) {
        char buf[160];
        std::snprintf(buf, sizeof buf,
                      "packet %llu refers to manifest %08x, which is not known (give --manifest "
                      "or its manifest packet first)",
                      static_cast<unsigned long long>(h->sequence), h->manifest_hash);
        return fail(where, buf);
      }
      return fail(where, d.error().message);
    }
    if (d->manifest_part)
      learn_part(where, d->header.manifest_hash, d->header.version, *d->manifest_part);
    if (!d->windows.empty()) print_windows(where, *d, cm->manifest);
    for (const auto& a : d->alerts) print_alert(where, a, cm->manifest);
    for (const auto& hr : d->health) print_health(where, hr);
    for (const auto& c : d->cleanings) print_cleaning(where, c, cm->manifest);
  }

  void fail(const std::string& where, const std::string& why) {
    ++errors_;
    std::fprintf(stderr, "tarn decode: %s: %s\n", where.c_str(), why.c_str());
  }

 private:
  void learn_part(const std::string& where, std::uint32_t hash, std::uint8_t version,
                  const codec::ManifestPart& p) {
    auto& parts = parts_[hash];
    parts.erase(std::remove_if(parts.begin(), parts.end(),
                               [&](auto& x) { return x.index == p.index || x.count != p.count; }),
                parts.end());
    parts.push_back(p);
    if (parts.size() != p.count) return;
    auto m = codec::assemble_manifest(parts, hash, version);
    parts_.erase(hash);
    if (!m) return fail(where, m.error().message);
    add_manifest(*m);
    std::string at;
    if (m->latitude) at = "; at " + number(*m->latitude, 6) + ", " + number(*m->longitude, 6);
    if (m->elevation_m) at += (at.empty() ? "; " : ", ") + number(*m->elevation_m, 1) + " m";
    std::fprintf(stderr, "tarn decode: %s: manifest of station %s learned (%08x, %zu channels)%s\n",
                 where.c_str(), m->station.c_str(), hash, m->channels.size(), at.c_str());
  }

  void header(const char* text) {
    if (csv_ && !header_done_) std::printf("%s\n", text);
    header_done_ = true;
  }

  void print_windows(const std::string& where, const codec::DecodedPacket& d,
                     const codec::Manifest& m) {
    if (!windows_ && d.windows.front().stats_only) {
      std::fprintf(stderr,
                   "tarn decode: %s: statistics-only packet, no samples (use --records "
                   "windows)\n",
                   where.c_str());
      return;
    }
    for (const auto& w : d.windows) {
      if (windows_) {
        for (std::size_t c = 0; c < w.channels.size(); ++c)
          print_window_record(w, c, m.channels[w.first_channel + c]);
        continue;
      }
      header("t,ch,v,f,r");
      for (std::uint32_t i = 0; i < w.slots; ++i)
        for (std::size_t c = 0; c < w.channels.size(); ++c)
          print_sample(w, i, c, m.channels[w.first_channel + c], m.period_s);
    }
  }

  void print_sample(const codec::Window& w, std::uint32_t i, std::size_t c,
                    const codec::ManifestChannel& mc, std::uint32_t period) {
    const auto& ch = w.channels[c];
    const std::int64_t t = w.start + std::int64_t(i) * period;
    const std::uint32_t r = ch.reasons.empty() ? 0 : ch.reasons[i];
    const std::string v = ch.values[i] ? number(*ch.values[i], decimals_of(mc.resolution)) : "";
    if (csv_) {
      std::printf("%lld,%s,%s,%d,%u\n", static_cast<long long>(t), csv_text(mc.name).c_str(),
                  v.c_str(), int(ch.flags[i]), r);
      return;
    }
    std::printf("{\"t\":%lld,\"ch\":%s,\"v\":%s,\"f\":%d", static_cast<long long>(t),
                json(mc.name).dump().c_str(), v.empty() ? "null" : v.c_str(), int(ch.flags[i]));
    if (r) std::printf(",\"r\":%u", r);
    std::printf("}\n");
  }

  void print_window_record(const codec::Window& w, std::size_t c,
                           const codec::ManifestChannel& mc) {
    const auto& s = w.channels[c].stats;
    const int dec = decimals_of(mc.resolution);
    auto num = [&](const std::optional<double>& v, int places) {
      return v ? number(*v, places) : std::string(csv_ ? "" : "null");
    };
    auto time = [&](const std::optional<std::int64_t>& t) {
      return t ? std::to_string(*t) : std::string(csv_ ? "" : "null");
    };
    const std::string mean = num(s.mean, dec + 1), min = num(s.min, dec), max = num(s.max, dec),
                      sd = num(s.sd, dec + 1);
    // Which samples the statistics cover (FORMAT.md §4.4).
    const char* basis = s.basis == codec::StatsBasis::not_evaluated ? "not_evaluated" : "used";
    if (csv_) {
      header(
          "start,ch,slots,partial,clock_unsynced,stats_only,n1,n2,n3,n4,n9,mean,min,max,sd,"
          "first_t,last_t,reasons,basis");
      std::printf("%lld,%s,%u,%d,%d,%d,%u,%u,%u,%u,%u,%s,%s,%s,%s,%s,%s,%u,%s\n",
                  static_cast<long long>(w.start), csv_text(mc.name).c_str(), w.slots, w.partial,
                  w.clock_unsynced, w.stats_only, s.counts[0], s.counts[1], s.counts[2],
                  s.counts[3], s.counts[4], mean.c_str(), min.c_str(), max.c_str(), sd.c_str(),
                  time(s.first_t).c_str(), time(s.last_t).c_str(), s.reasons_any, basis);
      return;
    }
    std::printf(
        "{\"start\":%lld,\"ch\":%s,\"slots\":%u,\"partial\":%s,\"clock_unsynced\":%s,"
        "\"stats_only\":%s,\"counts\":{\"1\":%u,\"2\":%u,\"3\":%u,\"4\":%u,\"9\":%u},"
        "\"mean\":%s,\"min\":%s,\"max\":%s,\"sd\":%s,\"first_t\":%s,\"last_t\":%s,"
        "\"reasons\":%u,\"basis\":\"%s\"}\n",
        static_cast<long long>(w.start), json(mc.name).dump().c_str(), w.slots,
        w.partial ? "true" : "false", w.clock_unsynced ? "true" : "false",
        w.stats_only ? "true" : "false", s.counts[0], s.counts[1], s.counts[2], s.counts[3],
        s.counts[4], mean.c_str(), min.c_str(), max.c_str(), sd.c_str(), time(s.first_t).c_str(),
        time(s.last_t).c_str(), s.reasons_any, basis);
  }

  void print_alert(const std::string& where, const codec::AlertEvent& a, const codec::Manifest& m) {
    if (csv_) {
      std::fprintf(stderr, "tarn decode: %s: alert packet skipped in csv (use jsonl)\n",
                   where.c_str());
      return;
    }
    const auto& mc = m.channels[a.channel];
    json j{{"channel", mc.name},
           {"level", a.level},
           {"level_name", a.level_name},
           {"previous_level", a.previous_level},
           {"window_start", a.window_start},
           {"rule", a.rule_id},
           {"kind", kKinds[int(a.kind)]},
           {"cause", kCauses[int(a.cause)]}};
    std::string text = j.dump();
    text.insert(text.size() - 1,
                ",\"statistic\":" + number(a.statistic, decimals_of(mc.resolution)));
    std::printf("{\"alert\":%s}\n", text.c_str());
  }

  // Names of codec::AlertKind and codec::StaleCause values (FORMAT.md §6.1).
  static constexpr const char* kKinds[] = {"change", "stale", "resumed"};
  static constexpr const char* kCauses[] = {"none", "instrument_offline", "no_values",
                                            "all_failed_qc"};

  void print_cleaning(const std::string& where, const codec::CleaningRecord& c,
                      const codec::Manifest& m) {
    if (csv_) {
      std::fprintf(stderr, "tarn decode: %s: cleaning packet skipped in csv (use jsonl)\n",
                   where.c_str());
      return;
    }
    const auto& mc = m.channels[c.channel];
    const int dec = decimals_of(mc.resolution);
    auto med = [&](const std::optional<double>& v) { return v ? number(*v, dec) : "null"; };
    std::printf(
        "{\"cleaning\":{\"channel\":%s,\"maintenance_start\":%lld,\"maintenance_end\":%lld,"
        "\"before\":%s,\"n_before\":%u,\"after\":%s,\"n_after\":%u}}\n",
        json(mc.name).dump().c_str(), static_cast<long long>(c.maintenance_start),
        static_cast<long long>(c.maintenance_end), med(c.before).c_str(), unsigned(c.n_before),
        med(c.after).c_str(), unsigned(c.n_after));
  }

  void print_health(const std::string& where, const codec::HealthRecord& h) {
    if (csv_) {
      std::fprintf(stderr, "tarn decode: %s: health packet skipped in csv (use jsonl)\n",
                   where.c_str());
      return;
    }
    std::string s = "{\"health\":{\"t\":" + std::to_string(h.t);
    if (h.board_temp_c) s += ",\"board_temp_c\":" + number(*h.board_temp_c, 1);
    if (h.disk_free_mib) s += ",\"disk_free_mib\":" + std::to_string(*h.disk_free_mib);
    if (h.supply_v) s += ",\"supply_v\":" + number(*h.supply_v, 3);
    std::printf("%s}}\n", s.c_str());
  }

  static std::string csv_text(const std::string& s) {
    if (s.find_first_of(",\"\n") == std::string::npos) return s;
    std::string q = "\"";
    for (char ch : s) q += ch == '"' ? std::string("\"\"") : std::string(1, ch);
    return q + "\"";
  }

  bool windows_, csv_;
  bool header_done_ = false;
  std::size_t errors_ = 0;
  std::map<std::uint32_t, codec::CheckedManifest> known_;
  std::map<std::uint32_t, std::vector<codec::ManifestPart>> parts_;
};

// Hex of the last word of a line; empty optional when it is not hex.
std::optional<std::vector<std::uint8_t>> hex_word(const std::string& line, std::string& why) {
  auto end = line.find_last_not_of(" \t\r");
  auto begin = line.find_last_of(" \t", end);
  std::string w = line.substr(begin == std::string::npos ? 0 : begin + 1,
                              end - (begin == std::string::npos ? 0 : begin + 1) + 1);
  if (w.size() % 2) {
    why = "odd number of hex digits";
    return std::nullopt;
  }
  std::vector<std::uint8_t> out;
  out.reserve(w.size() / 2);
  auto val = [](char c) {
    return c >= '0' && c <= '9'   ? c - '0'
           : c >= 'a' && c <= 'f' ? c - 'a' + 10
           : c >= 'A' && c <= 'F' ? c - 'A' + 10
                                  : -1;
  };
  for (std::size_t i = 0; i < w.size(); i += 2) {
    int hi = val(w[i]), lo = val(w[i + 1]);
    if (hi < 0 || lo < 0) {
      why = "not hex (allowed: 0-9, a-f)";
      return std::nullopt;
    }
    out.push_back(std::uint8_t(hi << 4 | lo));
  }
  return out;
}

void decode_stream(std::istream& in, const std::string& name, bool hex, Decoding& d) {
  if (!hex) {
    std::vector<std::uint8_t> bytes((std::istreambuf_iterator<char>(in)), {});
    d.packet(name, bytes);
    return;
  }
  std::size_t n = 0;
  for (std::string line; std::getline(in, line);) {
    ++n;
    if (line.find_first_not_of(" \t\r") == std::string::npos) continue;
    std::string why;
    const std::string where = name + ":" + std::to_string(n);
    auto bytes = hex_word(line, why);
    if (!bytes) {
      d.fail(where, why);
      continue;
    }
    d.packet(where, *bytes);
  }
}

int run_decode(const cli::Args& args) {
  cli::Options o(args, {"manifest", "records", "format"}, {"help", "hex"});
  if (!o.ok() || o.has("help")) return usage(o, kDecodeUsage);
  const std::string records = o.get("records", "samples"), format = o.get("format", "jsonl");
  if (records != "samples" && records != "windows") {
    std::fprintf(stderr, "tarn decode: --records must be samples or windows, not '%s'\n",
                 records.c_str());
    return cli::ex_usage;
  }
  if (format != "jsonl" && format != "csv") {
    std::fprintf(stderr, "tarn decode: --format must be jsonl or csv, not '%s'\n", format.c_str());
    return cli::ex_usage;
  }
  Decoding d(records == "windows", format == "csv");
  if (o.has("manifest")) {
    auto m = tarn::daemon::load_manifest_file(o.get("manifest"));
    if (!m) {
      std::fprintf(stderr, "tarn decode: %s\n", m.error().message.c_str());
      return cli::ex_config;
    }
    d.add_manifest(*m);
  }
  std::vector<std::string> files = o.positional();
  if (files.empty()) files.push_back("-");
  bool unreadable = false;
  for (const std::string& f : files) {
    if (f == "-") {
      decode_stream(std::cin, "stdin", o.has("hex"), d);
      continue;
    }
    std::ifstream in(f, std::ios::binary);
    if (!in) {
      std::fprintf(stderr, "tarn decode: %s: cannot be read\n", f.c_str());
      unreadable = true;
      continue;
    }
    decode_stream(in, f, o.has("hex"), d);
  }
  std::fflush(stdout);
  if (d.errors())
    std::fprintf(stderr, "tarn decode: %zu packet%s rejected\n", d.errors(),
                 d.errors() == 1 ? "" : "s");
  if (unreadable) return cli::ex_noinput;
  return d.errors() ? cli::ex_dataerr : cli::ex_ok;
}

// ---- manifest -----------------------------------------------------------------------

const char* kManifestUsage =
    "usage: tarn manifest --config FILE [--hex] [--mtu BYTES] [--first-sequence N]\n"
    "Writes the manifest of a station config as M.json (codec/FORMAT.md §9), or with --hex\n"
    "as manifest packets, one hex line each, split to fit the MTU (default 65535).\n";

int run_manifest(const cli::Args& args) {
  cli::Options o(args, {"config", "mtu", "first-sequence"}, {"help", "hex"});
  if (!o.ok() || o.has("help") || !o.has("config") || !o.positional().empty())
    return usage(o, kManifestUsage);
  std::size_t mtu = 0, seq = 0;
  if (!parse_size(o.get("mtu", "65535"), 32, codec::kMaxPacketBytes, mtu)) {
    std::fprintf(stderr, "tarn manifest: --mtu must be 32..65535 bytes\n");
    return cli::ex_usage;
  }
  if (!parse_size(o.get("first-sequence", "0"), 0, SIZE_MAX, seq)) {
    std::fprintf(stderr, "tarn manifest: --first-sequence must be an unsigned integer\n");
    return cli::ex_usage;
  }
  const std::string file = o.get("config");
  auto res = tarn::daemon::load_and_check(file);
  if (!res.config) {
    std::fputs(res.problems.render(file).c_str(), stderr);
    return cli::ex_config;
  }
  auto m = tarn::daemon::manifest_of_config(*res.config);
  if (!m) {
    std::fprintf(stderr, "tarn manifest: %s: %s\n", file.c_str(), m.error().message.c_str());
    return cli::ex_config;
  }
  if (!o.has("hex")) {
    std::printf("%s\n", tarn::daemon::manifest_to_json(*m).dump(2).c_str());
    return cli::ex_ok;
  }
  auto packets = codec::encode_manifest(*codec::check_manifest(*m), seq, mtu);
  if (!packets) {
    std::fprintf(stderr, "tarn manifest: %s\n", packets.error().message.c_str());
    return cli::ex_dataerr;
  }
  for (const auto& p : *packets) std::printf("%s\n", to_hex(p.bytes).c_str());
  return cli::ex_ok;
}

}  // namespace

TARN_COMMAND(encode, "samples (JSON Lines) into hex packets", run_encode);
TARN_COMMAND(decode, "packets into samples or window records", run_decode);
TARN_COMMAND(manifest, "the channel manifest of a station config", run_manifest);
