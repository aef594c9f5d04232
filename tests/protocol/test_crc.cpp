#include <catch2/catch.hpp>

#include <cstdint>
#include <vector>

#include "drivers/protocol/crc.h"

using namespace tarn::protocol;

TEST_CASE("CRC-16/MODBUS and CRC-16/ARC check values", "[crc]") {
  // Check values of the Catalogue of parametrised CRC algorithms (reveng):
  // CRC-16/MODBUS check=0x4b37, CRC-16/ARC check=0xbb3d, over ASCII "123456789".
  CHECK(crc16_modbus("123456789") == 0x4B37);
  CHECK(crc16_arc("123456789") == 0xBB3D);
}

TEST_CASE("CRC-16/MODBUS of the Modbus serial line request examples", "[crc]") {
  // Modbus over Serial Line Specification and Implementation Guide V1.02: request
  // unit 1, function 03, start 0x006B, 3 registers ends with CRC bytes 0x74 0x17
  // (low byte first). The same frame built by python3-pymodbus 3.0.0rc1's
  // ModbusRtuFramer is 01 03 00 6b 00 03 74 17.
  const std::vector<std::uint8_t> req{0x01, 0x03, 0x00, 0x6B, 0x00, 0x03};
  const std::uint16_t crc = crc16_modbus(req);
  CHECK((crc & 0xFF) == 0x74);
  CHECK((crc >> 8) == 0x17);
  // Modicon's classic example, unit 17 (0x11), same request: CRC bytes 0x76 0x87
  // (Modicon Modbus Protocol Reference Guide PI-MBUS-300, from memory).
  const std::vector<std::uint8_t> req17{0x11, 0x03, 0x00, 0x6B, 0x00, 0x03};
  CHECK(crc16_modbus(req17) == 0x8776);
}

TEST_CASE("A frame with its CRC appended has a zero residue", "[crc]") {
  // Property of reflected CRCs without final XOR: CRC(frame + crc_lo + crc_hi) == 0.
  std::vector<std::uint8_t> frame{0x01, 0x03, 0x06, 0x02, 0x2B, 0x00, 0x00, 0x00, 0x64};
  const std::uint16_t crc = crc16_modbus(frame);
  frame.push_back(static_cast<std::uint8_t>(crc & 0xFF));
  frame.push_back(static_cast<std::uint8_t>(crc >> 8));
  CHECK(crc16_modbus(frame) == 0);
}

TEST_CASE("crc16_update continues a CRC across pieces", "[crc]") {
  const std::string_view a = "1234", b = "56789";
  const auto bytes = [](std::string_view s) {
    return std::span<const std::uint8_t>(reinterpret_cast<const std::uint8_t*>(s.data()), s.size());
  };
  CHECK(crc16_update(crc16_update(crc16_modbus_init, bytes(a)), bytes(b)) == 0x4B37);
  CHECK(crc16_update(crc16_update(crc16_arc_init, bytes(a)), bytes(b)) == 0xBB3D);
  CHECK(crc16_modbus("") == 0xFFFF);
  CHECK(crc16_arc("") == 0x0000);
}

TEST_CASE("NMEA 0183 checksum of published example sentences", "[crc]") {
  // Example sentences of Dale DePriest's "NMEA data" page (from memory):
  //   $GPGGA,123519,4807.038,N,01131.000,E,1,08,0.9,545.4,M,46.9,M,,*47
  //   $GPRMC,123519,A,4807.038,N,01131.000,E,022.4,084.4,230394,003.1,W*6A
  CHECK(nmea_checksum("GPGGA,123519,4807.038,N,01131.000,E,1,08,0.9,545.4,M,46.9,M,,") == 0x47);
  CHECK(nmea_checksum("GPRMC,123519,A,4807.038,N,01131.000,E,022.4,084.4,230394,003.1,W") == 0x6A);
  CHECK(nmea_checksum("") == 0);
  CHECK(nmea_checksum("AB") == ('A' ^ 'B'));
}
