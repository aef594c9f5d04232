// tarn encode --manifest M.json [--windows-per-packet N] [--mtu BYTES] [--stats-only]
// Samples are JSON Lines {"t": <unix s>, "ch": "<name>", "v": <number|null>, "f": <flag>},
// with "r": <reason bits> when non-zero; out come hex packets (codec/FORMAT.md).
#include <cmath>
#include <cstdio>
#include <fstream>
#include <iostream>
#include <map>
#include <nlohmann/json.hpp>
#include <sstream>

#include "codec/encoder.h"
#include "daemon/cli/codec_tool.h"
#include "daemon/cli/command.h"
#include "daemon/core/archive_windows.h"
#include "daemon/core/manifest_json.h"

namespace {

namespace cli = tarn::cli;
namespace codec = tarn::codec;
using nlohmann::json;
using tarn::cli::codec_tool::parse_size;
using tarn::cli::codec_tool::to_hex;
using tarn::cli::codec_tool::usage;

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

// Builds windows from the samples (daemon::place_samples): every manifest channel in
// every window that has a sample; a second sample for a slot is an error.
std::optional<std::string> build_windows(const std::vector<Sample>& samples,
                                         const codec::Manifest& m,
                                         std::vector<codec::Window>& out) {
  const std::uint32_t n = m.slots_per_window();
  std::vector<tarn::daemon::SlotSample> in;
  in.reserve(samples.size());
  for (const Sample& s : samples) in.push_back({s.t, std::size_t(s.channel), s.v, s.f, s.r});
  tarn::daemon::Placement placed = tarn::daemon::place_samples(m, in);
  if (!placed.duplicates.empty()) {
    const auto [later, first] = placed.duplicates.front();
    const Sample& s = samples[later];
    const std::int64_t start = codec::floor_div(s.t, m.window_s) * m.window_s;
    const std::int64_t slot_t = start + (s.t - start) / m.period_s * m.period_s;
    return "stdin:" + std::to_string(s.line) + ": second sample for channel \"" +
           m.channels[std::size_t(s.channel)].name +
           "\" in the slot at t=" + std::to_string(slot_t) + " (first on line " +
           std::to_string(samples[first].line) + ")";
  }
  if (placed.windows.empty()) return std::nullopt;
  // The stream may begin and end inside a window: those windows are partial, and the
  // last one ends after its last sample.
  auto slot_range = [&](const tarn::daemon::PlacedWindow& pw, bool first) {
    std::uint32_t best = first ? n : 0;
    for (std::uint32_t i = 0; i < n; ++i)
      for (const auto& filled : pw.filled)
        if (filled[i]) best = first ? std::min(best, i) : std::max(best, i + 1);
    return best;
  };
  tarn::daemon::PlacedWindow& first = placed.windows.front();
  if (slot_range(first, true) > 0) first.window.partial = true;
  tarn::daemon::PlacedWindow& last = placed.windows.back();
  if (std::uint32_t end = slot_range(last, false); end < n) {
    last.window.partial = true;
    last.window.slots = end;
    for (auto& c : last.window.channels)
      c.values.resize(end), c.flags.resize(end), c.reasons.resize(end);
  }
  for (auto& pw : placed.windows) {
    for (auto& c : pw.window.channels) c.stats = codec::summarise(c, pw.window.start, m.period_s);
    out.push_back(std::move(pw.window));
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

}  // namespace

TARN_COMMAND(encode, "samples (JSON Lines) into hex packets", run_encode);
