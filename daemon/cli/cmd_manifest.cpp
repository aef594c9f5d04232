// tarn manifest --config FILE [--hex] [--mtu BYTES]: the channel manifest of a
// station config (codec/FORMAT.md §9), as M.json or as hex manifest packets.
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
#include "daemon/core/config_check.h"
#include "daemon/core/manifest_json.h"

namespace {

namespace cli = tarn::cli;
namespace codec = tarn::codec;
using nlohmann::json;
using tarn::cli::codec_tool::parse_size;
using tarn::cli::codec_tool::to_hex;
using tarn::cli::codec_tool::usage;

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

TARN_COMMAND(manifest, "the channel manifest of a station config", run_manifest);
