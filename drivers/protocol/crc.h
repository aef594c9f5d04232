// Checksums used by the instrument protocols. Pure functions, no state.
//
//   crc16_modbus: CRC-16/MODBUS  (poly 0x8005 reflected = 0xA001, init 0xFFFF,
//                 no final XOR). Sent low byte first on the wire.
//   crc16_arc:    CRC-16/ARC     (same polynomial, init 0x0000). SDI-12 uses it
//                 for its CRC replies (aMC!, aCC!, ...).
//   nmea_checksum: NMEA 0183 XOR of every character between '$' and '*'.
//
// The *_update forms continue a running CRC, so a frame can be checked in pieces:
//   crc16_update(crc16_update(init, a), b) == crc over a followed by b.
// Thread-safety: all functions are pure.
#pragma once

#include <cstdint>
#include <span>
#include <string_view>

namespace tarn::protocol {

inline constexpr std::uint16_t crc16_modbus_init = 0xFFFF;
inline constexpr std::uint16_t crc16_arc_init = 0x0000;

// Continues a reflected CRC-16 with polynomial 0xA001 over `data`.
std::uint16_t crc16_update(std::uint16_t crc, std::span<const std::uint8_t> data);

std::uint16_t crc16_modbus(std::span<const std::uint8_t> data);
std::uint16_t crc16_modbus(std::string_view data);

std::uint16_t crc16_arc(std::span<const std::uint8_t> data);
std::uint16_t crc16_arc(std::string_view data);

// XOR of all bytes of `body` (the text between '$' and '*', both excluded).
std::uint8_t nmea_checksum(std::string_view body);

}  // namespace tarn::protocol
