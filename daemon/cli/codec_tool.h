// Helpers shared by the codec tools (`tarn encode`, `tarn decode`, `tarn manifest`;
// cmd_encode.cpp, cmd_decode.cpp, cmd_manifest.cpp).
#pragma once

#include <cstddef>
#include <cstdint>
#include <string>
#include <vector>

#include "daemon/cli/command.h"

namespace tarn::cli::codec_tool {

// Prints the option error (if any) and `text`: to stdout for --help (returns 0),
// else to stderr (returns ex_usage).
int usage(const Options& o, const char* text);
// Parses a decimal size in [lo, hi]; false if it is not one.
bool parse_size(const std::string& s, std::size_t lo, std::size_t hi, std::size_t& out);
// Lower-case hex, two digits per byte.
std::string to_hex(const std::vector<std::uint8_t>& b);

}  // namespace tarn::cli::codec_tool
