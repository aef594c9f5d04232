// Modbus RTU framing for the register reads a polling master needs: function 03
// (read holding registers) and 04 (read input registers), CRC-16/MODBUS, the
// exception replies, register decoding and the 3.5-character silent interval.
// Sources: Modbus Application Protocol Specification V1.1b3 (function codes,
// quantity 1..125, exception codes) and Modbus over Serial Line Specification
// and Implementation Guide V1.02 (RTU framing, CRC low byte first, t3.5).
// Section numbers cited below are from memory.
//
// How a driver uses it:
//   1. build_read_request({unit, function, start, count}) -> 8 bytes to send.
//      Broadcast (unit 0) is refused: a read needs a reply.
//   2. wait t3.5 (silent_interval()) before sending; after sending, append the
//      received bytes to a buffer and call parse_read_response(buffer, request)
//      after each read until the status is not `incomplete` (or a timeout).
//   3. status ok: registers are CRC-checked and belong to this request;
//      status exception: the server answered with a named exception code;
//      status invalid: drop the buffer, wait for the line to go silent, flag the
//      sample garbled. No register values are ever returned with a bad CRC.
//   4. decode_register(registers, field) -> a value in physical units.
// Thread-safety: all functions are pure.
#pragma once

#include <array>
#include <chrono>
#include <cstddef>
#include <cstdint>
#include <optional>
#include <span>
#include <string_view>
#include <vector>

#include "codec/result.h"

namespace tarn::protocol::modbus {

inline constexpr std::uint8_t fn_read_holding_registers = 0x03;
inline constexpr std::uint8_t fn_read_input_registers = 0x04;
inline constexpr std::uint8_t exception_bit = 0x80;
inline constexpr std::uint8_t min_unit = 1;    // 0 is broadcast: never used for reads
inline constexpr std::uint8_t max_unit = 247;  // 248..255 reserved (Serial Line V1.02 §2.2)
inline constexpr std::uint16_t max_registers_per_read = 125;  // App. Protocol V1.1b3 §6.3/6.4
inline constexpr std::size_t max_frame_bytes = 256;           // Serial Line V1.02 §2.5.1

struct ReadRequest {
  std::uint8_t unit = 1;
  std::uint8_t function = fn_read_holding_registers;  // 0x03 or 0x04
  std::uint16_t start = 0;                            // protocol address (0-based)
  std::uint16_t count = 1;                            // 1..125
};

enum class RequestError {
  broadcast_read,   // unit 0
  bad_unit,         // unit > 247
  bad_function,     // not 03/04
  bad_count,        // 0 or > 125
  address_overflow  // start + count > 65536
};
std::string_view to_string(RequestError e);

using RequestFrame = std::array<std::uint8_t, 8>;

// REQUIRES: nothing; bad requests come back as errors.
Result<RequestFrame, RequestError> build_read_request(const ReadRequest& req);

// Exception codes, Modbus Application Protocol Specification V1.1b3 §7.
enum class ExceptionCode : std::uint8_t {
  illegal_function = 0x01,
  illegal_data_address = 0x02,
  illegal_data_value = 0x03,
  server_device_failure = 0x04,
  acknowledge = 0x05,
  server_device_busy = 0x06,
  memory_parity_error = 0x08,
  gateway_path_unavailable = 0x0A,
  gateway_target_failed_to_respond = 0x0B,
};
// The spec's name in capitals, e.g. "ILLEGAL DATA ADDRESS"; codes the spec does
// not define give "UNKNOWN EXCEPTION".
std::string_view exception_name(std::uint8_t code);

enum class ResponseStatus {
  incomplete,  // a prefix of a possible reply: read more bytes
  ok,          // registers valid for this request
  exception,   // a CRC-valid exception reply from the right unit
  invalid,     // unusable: see `fault`
};

enum class ResponseFault {
  none,
  crc_mismatch,         // full-length frame whose CRC does not match
  unit_mismatch,        // CRC-valid frame from another unit (e.g. a late reply)
  function_mismatch,    // CRC-valid frame for another function
  byte_count_mismatch,  // byte count is not 2 x requested registers
  unexpected_function,  // function byte is neither ours nor an exception: length unknown
  trailing_bytes,       // more bytes after a complete frame (reported, frame still used)
};
std::string_view to_string(ResponseFault f);

struct Response {
  ResponseStatus status = ResponseStatus::incomplete;
  ResponseFault fault = ResponseFault::none;
  std::uint8_t exception_code = 0;       // when status == exception
  std::size_t frame_bytes = 0;           // length of the frame when known (ok/exception/invalid)
  std::vector<std::uint16_t> registers;  // when status == ok
};

// Parses the bytes received since `req` was sent. Incremental: call again with
// the longer buffer after each read. Checks in order: frame length from the
// header, CRC, unit, function, byte count. Never returns registers unless the
// CRC matched and unit, function and byte count are the request's.
// Bytes after a complete ok/exception frame set fault = trailing_bytes; the
// frame is still returned (the driver may choose to flag or discard it).
// REQUIRES: req is a valid read request (build_read_request accepted it).
Response parse_read_response(std::span<const std::uint8_t> buffer, const ReadRequest& req);

// ---- register decoding ----

enum class RegisterType { u16, s16, u32, s32, f32 };
enum class WordOrder {
  high_word_first,  // "big-endian words": register n holds bits 31..16 (Modbus convention)
  low_word_first,   // "word-swapped": register n holds bits 15..0
};

// Number of registers a value of this type occupies (1 or 2).
std::size_t register_span(RegisterType t);

struct RegisterField {
  std::size_t index = 0;  // offset of the first register within the read block
  RegisterType type = RegisterType::u16;
  WordOrder order = WordOrder::high_word_first;
  double scale = 1.0;  // value = raw * scale + offset
  double offset = 0.0;
};

enum class DecodeError {
  out_of_block,  // the field does not fit in the registers read
  not_finite,    // f32 NaN or infinity (instrument sentinel or garbage)
};
std::string_view to_string(DecodeError e);

Result<double, DecodeError> decode_register(std::span<const std::uint16_t> registers,
                                            const RegisterField& field);

// ---- timing ----

struct CharacterFrame {
  unsigned data_bits = 8;  // RTU requires 8
  bool parity = true;      // even/odd parity bit present
  unsigned stop_bits = 1;  // 1 with parity, 2 without (Serial Line V1.02 §2.5.1)
};

// Bits on the wire per character: start + data + parity + stop.
unsigned bits_per_character(const CharacterFrame& f);

// The silent interval t3.5 that separates frames, rounded up to whole
// microseconds. Above 19200 baud the fixed 1750 us the spec recommends.
// REQUIRES: baud > 0.
std::chrono::microseconds silent_interval(unsigned baud, const CharacterFrame& f = {});

// The inter-character timeout t1.5; above 19200 baud the fixed 750 us.
// REQUIRES: baud > 0.
std::chrono::microseconds inter_character_timeout(unsigned baud, const CharacterFrame& f = {});

}  // namespace tarn::protocol::modbus
