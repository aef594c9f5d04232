#include "daemon/cli/codec_tool.h"

#include <cstdio>

namespace tarn::cli::codec_tool {

int usage(const Options& o, const char* text) {
  const bool help = o.has("help");
  std::fprintf(help ? stdout : stderr, "%s%s%s", o.error().c_str(), o.error().empty() ? "" : "\n",
               text);
  return help ? 0 : ex_usage;
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

}  // namespace tarn::cli::codec_tool
