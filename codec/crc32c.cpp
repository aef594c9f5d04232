#include "codec/crc32c.h"

#include <array>

namespace tarn::codec {
namespace {

// Reflected polynomial of 0x1edc6f41.
constexpr std::uint32_t kPolyReflected = 0x82f63b78u;

constexpr std::array<std::array<std::uint32_t, 256>, 4> make_tables() {
  std::array<std::array<std::uint32_t, 256>, 4> t{};
  for (std::uint32_t i = 0; i < 256; ++i) {
    std::uint32_t c = i;
    for (int k = 0; k < 8; ++k) c = (c & 1u) ? (c >> 1) ^ kPolyReflected : c >> 1;
    t[0][i] = c;
  }
  for (std::uint32_t i = 0; i < 256; ++i)
    for (int s = 1; s < 4; ++s) t[s][i] = (t[s - 1][i] >> 8) ^ t[0][t[s - 1][i] & 0xffu];
  return t;
}

constexpr auto kTables = make_tables();

}  // namespace

std::uint32_t crc32c(std::span<const std::uint8_t> data) {
  std::uint32_t c = 0xffffffffu;
  std::size_t i = 0;
  const std::size_t n = data.size();
  // Slicing by four: four bytes per step.
  for (; i + 4 <= n; i += 4) {
    c ^= std::uint32_t(data[i]) | std::uint32_t(data[i + 1]) << 8 |
         std::uint32_t(data[i + 2]) << 16 | std::uint32_t(data[i + 3]) << 24;
    c = kTables[3][c & 0xffu] ^ kTables[2][(c >> 8) & 0xffu] ^ kTables[1][(c >> 16) & 0xffu] ^
        kTables[0][c >> 24];
  }
  for (; i < n; ++i) c = (c >> 8) ^ kTables[0][(c ^ data[i]) & 0xffu];
  return c ^ 0xffffffffu;
}

}  // namespace tarn::codec
