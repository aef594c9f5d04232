#include <catch2/catch.hpp>

#include <cmath>
#include <cstdint>
#include <vector>

#include "drivers/protocol/crc.h"
#include "drivers/protocol/modbus_rtu.h"

using namespace tarn::protocol;
using namespace tarn::protocol::modbus;
using Bytes = std::vector<std::uint8_t>;

namespace {

Bytes with_crc(Bytes b) {
  const std::uint16_t crc = crc16_modbus(b);
  b.push_back(static_cast<std::uint8_t>(crc & 0xFF));
  b.push_back(static_cast<std::uint8_t>(crc >> 8));
  return b;
}

}  // namespace

TEST_CASE("Modbus read requests", "[modbus]") {
  SECTION("spec example: unit 1, 03, start 0x006B, 3 registers") {
    // Modbus over Serial Line V1.02 example; identical to python3-pymodbus
    // 3.0.0rc1 ModbusRtuFramer output 0103006b00037417.
    auto f = build_read_request({1, fn_read_holding_registers, 0x006B, 3});
    REQUIRE(f);
    CHECK(f.value() == RequestFrame{0x01, 0x03, 0x00, 0x6B, 0x00, 0x03, 0x74, 0x17});
  }
  SECTION("input registers, unit 17 (pymodbus 3.0.0rc1: 110400000002735b)") {
    auto f = build_read_request({17, fn_read_input_registers, 0x0000, 2});
    REQUIRE(f);
    CHECK(f.value() == RequestFrame{0x11, 0x04, 0x00, 0x00, 0x00, 0x02, 0x73, 0x5B});
  }
  SECTION("refused requests") {
    CHECK(build_read_request({0, 3, 0, 1}).error() == RequestError::broadcast_read);
    CHECK(build_read_request({248, 3, 0, 1}).error() == RequestError::bad_unit);
    CHECK(build_read_request({1, 6, 0, 1}).error() == RequestError::bad_function);
    CHECK(build_read_request({1, 3, 0, 0}).error() == RequestError::bad_count);
    CHECK(build_read_request({1, 3, 0, 126}).error() == RequestError::bad_count);
    CHECK(build_read_request({1, 3, 0xFFFF, 2}).error() == RequestError::address_overflow);
    CHECK(build_read_request({247, 4, 0xFFFF, 1}));  // last register, last unit: fine
    CHECK(build_read_request({1, 3, 0, 125}));
  }
}

TEST_CASE("Modbus responses from python3-pymodbus", "[modbus]") {
  // Frames built with python3-pymodbus 3.0.0rc1 (Debian), ModbusRtuFramer.buildPacket:
  //   ReadHoldingRegistersResponse([0x022B, 0x0000, 0x0064]), unit 1 -> 010306022b00000064057a
  //   ReadInputRegistersResponse([0x1234, 0xABCD]), unit 247        -> f704041234abcd9798
  //   ExceptionResponse(0x03, IllegalAddress), unit 1               -> 018302c0f1
  //   ExceptionResponse(0x04, SlaveBusy), unit 5                    -> 05840682c3
  SECTION("holding registers") {
    const Bytes b{0x01, 0x03, 0x06, 0x02, 0x2B, 0x00, 0x00, 0x00, 0x64, 0x05, 0x7A};
    auto r = parse_read_response(b, {1, 3, 0x006B, 3});
    REQUIRE(r.status == ResponseStatus::ok);
    CHECK(r.fault == ResponseFault::none);
    CHECK(r.frame_bytes == 11);
    CHECK(r.registers == std::vector<std::uint16_t>{0x022B, 0x0000, 0x0064});
  }
  SECTION("input registers, unit 247") {
    const Bytes b{0xF7, 0x04, 0x04, 0x12, 0x34, 0xAB, 0xCD, 0x97, 0x98};
    auto r = parse_read_response(b, {247, 4, 0, 2});
    REQUIRE(r.status == ResponseStatus::ok);
    CHECK(r.registers == std::vector<std::uint16_t>{0x1234, 0xABCD});
  }
  SECTION("exception ILLEGAL DATA ADDRESS") {
    const Bytes b{0x01, 0x83, 0x02, 0xC0, 0xF1};
    auto r = parse_read_response(b, {1, 3, 0, 1});
    REQUIRE(r.status == ResponseStatus::exception);
    CHECK(r.exception_code == 0x02);
    CHECK(exception_name(r.exception_code) == "ILLEGAL DATA ADDRESS");
    CHECK(r.registers.empty());
  }
  SECTION("exception SERVER DEVICE BUSY on function 04") {
    const Bytes b{0x05, 0x84, 0x06, 0x82, 0xC3};
    auto r = parse_read_response(b, {5, 4, 0, 1});
    REQUIRE(r.status == ResponseStatus::exception);
    CHECK(exception_name(r.exception_code) == "SERVER DEVICE BUSY");
  }
}

TEST_CASE("Modbus exception names follow the Application Protocol V1.1b3", "[modbus]") {
  // Codes as in Modbus Application Protocol Specification V1.1b3 §7 and
  // python3-pymodbus's ModbusExceptions (1,2,3,4,5,6,8,10,11).
  CHECK(exception_name(0x01) == "ILLEGAL FUNCTION");
  CHECK(exception_name(0x03) == "ILLEGAL DATA VALUE");
  CHECK(exception_name(0x04) == "SERVER DEVICE FAILURE");
  CHECK(exception_name(0x05) == "ACKNOWLEDGE");
  CHECK(exception_name(0x08) == "MEMORY PARITY ERROR");
  CHECK(exception_name(0x0A) == "GATEWAY PATH UNAVAILABLE");
  CHECK(exception_name(0x0B) == "GATEWAY TARGET DEVICE FAILED TO RESPOND");
  CHECK(exception_name(0x07) == "UNKNOWN EXCEPTION");
  CHECK(exception_name(0x00) == "UNKNOWN EXCEPTION");
}

TEST_CASE("Modbus response faults", "[modbus]") {
  const ReadRequest req{1, 3, 0x006B, 3};
  const Bytes good{0x01, 0x03, 0x06, 0x02, 0x2B, 0x00, 0x00, 0x00, 0x64, 0x05, 0x7A};

  SECTION("every truncation of a good frame is incomplete, never a value") {
    for (std::size_t n = 0; n < good.size(); ++n) {
      auto r = parse_read_response(std::span(good).first(n), req);
      INFO("prefix length " << n);
      CHECK(r.status == ResponseStatus::incomplete);
      CHECK(r.registers.empty());
    }
  }
  SECTION("any single corrupted byte is rejected") {
    for (std::size_t i = 0; i < good.size(); ++i) {
      for (int bit = 0; bit < 8; ++bit) {
        Bytes b = good;
        b[i] ^= static_cast<std::uint8_t>(1u << bit);
        auto r = parse_read_response(b, req);
        INFO("byte " << i << " bit " << bit);
        CHECK(r.status != ResponseStatus::ok);
        CHECK(r.registers.empty());
      }
    }
  }
  SECTION("wrong CRC") {
    Bytes b = good;
    b.back() ^= 0xFF;
    auto r = parse_read_response(b, req);
    CHECK(r.status == ResponseStatus::invalid);
    CHECK(r.fault == ResponseFault::crc_mismatch);
  }
  SECTION("CRC-valid reply from another unit (a late answer)") {
    auto r = parse_read_response(with_crc({0x02, 0x03, 0x06, 1, 2, 3, 4, 5, 6}), req);
    CHECK(r.status == ResponseStatus::invalid);
    CHECK(r.fault == ResponseFault::unit_mismatch);
  }
  SECTION("CRC-valid reply for the other read function") {
    auto r = parse_read_response(with_crc({0x01, 0x04, 0x06, 1, 2, 3, 4, 5, 6}), req);
    CHECK(r.fault == ResponseFault::function_mismatch);
    auto e = parse_read_response(with_crc({0x01, 0x84, 0x02}), req);
    CHECK(e.fault == ResponseFault::function_mismatch);
  }
  SECTION("byte count that does not fit the request is rejected at once") {
    auto r = parse_read_response(Bytes{0x01, 0x03, 0x04}, req);
    CHECK(r.status == ResponseStatus::invalid);
    CHECK(r.fault == ResponseFault::byte_count_mismatch);
    CHECK(parse_read_response(Bytes{0x01, 0x03, 0xFF}, req).fault ==
          ResponseFault::byte_count_mismatch);
  }
  SECTION("garbage function code") {
    auto r = parse_read_response(Bytes{0x01, 0x10, 0x00, 0x00}, req);
    CHECK(r.status == ResponseStatus::invalid);
    CHECK(r.fault == ResponseFault::unexpected_function);
  }
  SECTION("trailing bytes after a good frame are reported") {
    Bytes b = good;
    b.push_back(0x00);
    auto r = parse_read_response(b, req);
    CHECK(r.status == ResponseStatus::ok);
    CHECK(r.fault == ResponseFault::trailing_bytes);
    CHECK(r.frame_bytes == good.size());
  }
  SECTION("fault and error texts are not empty") {
    CHECK(to_string(ResponseFault::crc_mismatch) == "CRC mismatch");
    CHECK(!to_string(RequestError::broadcast_read).empty());
    CHECK(!to_string(DecodeError::out_of_block).empty());
  }
}

TEST_CASE("Register decoding against python3-pymodbus payloads", "[modbus]") {
  // BinaryPayloadBuilder(byteorder=Endian.Big, wordorder=...) of python3-pymodbus
  // 3.0.0rc1, values f32 -12.5, s32 -123456, u32 3000000000, s16 -2, u16 65535, f32 21.375:
  //   wordorder Big:    c148 0000 fffe 1dc0 b2d0 5e00 fffe ffff 41ab 0000
  //   wordorder Little: 0000 c148 1dc0 fffe 5e00 b2d0 fffe ffff 0000 41ab
  const std::vector<std::uint16_t> big{0xc148, 0x0000, 0xfffe, 0x1dc0, 0xb2d0,
                                       0x5e00, 0xfffe, 0xffff, 0x41ab, 0x0000};
  const std::vector<std::uint16_t> little{0x0000, 0xc148, 0x1dc0, 0xfffe, 0x5e00,
                                          0xb2d0, 0xfffe, 0xffff, 0x0000, 0x41ab};
  for (auto [regs, order] : {std::pair{&big, WordOrder::high_word_first},
                             std::pair{&little, WordOrder::low_word_first}}) {
    CHECK(decode_register(*regs, {0, RegisterType::f32, order}).value() == -12.5);
    CHECK(decode_register(*regs, {2, RegisterType::s32, order}).value() == -123456.0);
    CHECK(decode_register(*regs, {4, RegisterType::u32, order}).value() == 3000000000.0);
    CHECK(decode_register(*regs, {6, RegisterType::s16, order}).value() == -2.0);
    CHECK(decode_register(*regs, {7, RegisterType::u16, order}).value() == 65535.0);
    CHECK(decode_register(*regs, {8, RegisterType::f32, order}).value() == 21.375);
  }
  SECTION("scale and offset") {
    // e.g. a temperature register in 0.01 degC with a -40 offset: 6543 -> 25.43
    const std::vector<std::uint16_t> r{6543};
    auto v = decode_register(r, {0, RegisterType::u16, WordOrder::high_word_first, 0.01, -40.0});
    CHECK(v.value() == Approx(25.43));
    auto s = decode_register(big, {6, RegisterType::s16, WordOrder::high_word_first, 0.5, 1.0});
    CHECK(s.value() == 0.0);
  }
  SECTION("out of block and non-finite") {
    CHECK(decode_register(big, {9, RegisterType::u32}).error() == DecodeError::out_of_block);
    CHECK(decode_register(big, {10, RegisterType::u16}).error() == DecodeError::out_of_block);
    CHECK(decode_register({}, {0, RegisterType::u16}).error() == DecodeError::out_of_block);
    const std::vector<std::uint16_t> nan{0x7FC0, 0x0000}, inf{0x7F80, 0x0000};
    CHECK(decode_register(nan, {0, RegisterType::f32}).error() == DecodeError::not_finite);
    CHECK(decode_register(inf, {0, RegisterType::f32}).error() == DecodeError::not_finite);
  }
}

TEST_CASE("Modbus RTU silent interval", "[modbus]") {
  using us = std::chrono::microseconds;
  // 3.5 characters of 11 bits (Serial Line V1.02 §2.5.1: 1 start, 8 data,
  // parity, 1 stop). 9600 baud: 3.5 * 11 / 9600 s = 4010.4 us -> 4011 us.
  CHECK(bits_per_character({}) == 11);
  CHECK(bits_per_character({8, false, 2}) == 11);
  CHECK(bits_per_character({8, false, 1}) == 10);
  CHECK(silent_interval(9600) == us(4011));
  CHECK(silent_interval(19200) == us(2006));                // 2005.2 us
  CHECK(silent_interval(1200) == us(32084));                // 32083.3 us
  CHECK(silent_interval(9600, {8, false, 1}) == us(3646));  // 10-bit chars: 3645.8 us
  CHECK(inter_character_timeout(9600) == us(1719));         // 1718.75 us
  // Above 19200 baud the fixed values (spec §2.5.1.1, from memory): 1.750 ms, 750 us.
  CHECK(silent_interval(19201) == us(1750));
  CHECK(silent_interval(115200) == us(1750));
  CHECK(inter_character_timeout(38400) == us(750));
}
