// tarn decode --manifest M.json [--hex] [--records samples|windows] [--format jsonl|csv] [FILE...]
// Packets (codec/FORMAT.md) back into samples (JSON Lines {"t", "ch", "v", "f"[, "r"]})
// or window records.
#include <cmath>
#include <cstdio>
#include <fstream>
#include <iostream>
#include <map>
#include <nlohmann/json.hpp>
#include <sstream>

#include "codec/decoder.h"
#include "daemon/cli/codec_tool.h"
#include "daemon/cli/command.h"
#include "daemon/core/manifest_json.h"

namespace {

namespace cli = tarn::cli;
namespace codec = tarn::codec;
using nlohmann::json;
using tarn::cli::codec_tool::parse_size;
using tarn::cli::codec_tool::to_hex;
using tarn::cli::codec_tool::usage;

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

}  // namespace

TARN_COMMAND(decode, "packets into samples or window records", run_decode);
