#include "drivers/protocol/crc.h"

#include <array>

namespace tarn::protocol {
namespace {

// Byte-wise table for the reflected polynomial 0xA001, built at compile time.
constexpr std::array<std::uint16_t, 256> make_table() {
  std::array<std::uint16_t, 256> t{};
  for (unsigned i = 0; i < 256; ++i) {
    std::uint16_t c = static_cast<std::uint16_t>(i);
    for (int bit = 0; bit < 8; ++bit) {
      c = (c & 1u) ? static_cast<std::uint16_t>((c >> 1) ^ 0xA001u)
                   : static_cast<std::uint16_t>(c >> 1);
    }
    t[i] = c;
  }
  return t;
}

constexpr auto table = make_table();

std::span<const std::uint8_t> bytes_of(std::string_view s) {
  return {reinterpret_cast<const std::uint8_t*>(s.data()), s.size()};
}

}  // namespace

std::uint16_t crc16_update(std::uint16_t crc, std::span<const std::uint8_t> data) {
  for (std::uint8_t b : data) {
    crc = static_cast<std::uint16_t>((crc >> 8) ^ table[(crc ^ b) & 0xFFu]);
  }
  return crc;
}

std::uint16_t crc16_modbus(std::span<const std::uint8_t> data) {
  return crc16_update(crc16_modbus_init, data);
}
std::uint16_t crc16_modbus(std::string_view data) {
  return crc16_modbus(bytes_of(data));
}

std::uint16_t crc16_arc(std::span<const std::uint8_t> data) {
  return crc16_update(crc16_arc_init, data);
}
std::uint16_t crc16_arc(std::string_view data) {
  return crc16_arc(bytes_of(data));
}

std::uint8_t nmea_checksum(std::string_view body) {
  std::uint8_t x = 0;
  for (char c : body) x ^= static_cast<std::uint8_t>(c);
  return x;
}

}  // namespace tarn::protocol
