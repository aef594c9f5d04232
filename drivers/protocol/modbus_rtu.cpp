#include "drivers/protocol/modbus_rtu.h"

#include <bit>
#include <cmath>

#include "drivers/protocol/crc.h"

namespace tarn::protocol::modbus {

std::string_view to_string(RequestError e) {
  switch (e) {
    case RequestError::broadcast_read:
      return "unit 0 is broadcast and cannot be read (use 1..247)";
    case RequestError::bad_unit:
      return "unit id out of range (allowed 1..247)";
    case RequestError::bad_function:
      return "function not supported (allowed 03, 04)";
    case RequestError::bad_count:
      return "register count out of range (allowed 1..125)";
    case RequestError::address_overflow:
      return "start + count beyond register 65535";
  }
  return "unknown request error";
}

Result<RequestFrame, RequestError> build_read_request(const ReadRequest& req) {
  if (req.unit == 0) return fail(RequestError::broadcast_read);
  if (req.unit > max_unit) return fail(RequestError::bad_unit);
  if (req.function != fn_read_holding_registers && req.function != fn_read_input_registers) {
    return fail(RequestError::bad_function);
  }
  if (req.count == 0 || req.count > max_registers_per_read) return fail(RequestError::bad_count);
  if (std::uint32_t{req.start} + req.count > 0x10000u) return fail(RequestError::address_overflow);

  RequestFrame f{req.unit,
                 req.function,
                 static_cast<std::uint8_t>(req.start >> 8),
                 static_cast<std::uint8_t>(req.start & 0xFF),
                 static_cast<std::uint8_t>(req.count >> 8),
                 static_cast<std::uint8_t>(req.count & 0xFF),
                 0,
                 0};
  const std::uint16_t crc = crc16_modbus(std::span<const std::uint8_t>(f.data(), 6));
  f[6] = static_cast<std::uint8_t>(crc & 0xFF);  // low byte first (Serial Line V1.02 §2.5.1.2)
  f[7] = static_cast<std::uint8_t>(crc >> 8);
  return f;
}

std::string_view exception_name(std::uint8_t code) {
  switch (static_cast<ExceptionCode>(code)) {
    case ExceptionCode::illegal_function:
      return "ILLEGAL FUNCTION";
    case ExceptionCode::illegal_data_address:
      return "ILLEGAL DATA ADDRESS";
    case ExceptionCode::illegal_data_value:
      return "ILLEGAL DATA VALUE";
    case ExceptionCode::server_device_failure:
      return "SERVER DEVICE FAILURE";
    case ExceptionCode::acknowledge:
      return "ACKNOWLEDGE";
    case ExceptionCode::server_device_busy:
      return "SERVER DEVICE BUSY";
    case ExceptionCode::memory_parity_error:
      return "MEMORY PARITY ERROR";
    case ExceptionCode::gateway_path_unavailable:
      return "GATEWAY PATH UNAVAILABLE";
    case ExceptionCode::gateway_target_failed_to_respond:
      return "GATEWAY TARGET DEVICE FAILED TO RESPOND";
  }
  return "UNKNOWN EXCEPTION";
}

std::string_view to_string(ResponseFault f) {
  switch (f) {
    case ResponseFault::none:
      return "none";
    case ResponseFault::crc_mismatch:
      return "CRC mismatch";
    case ResponseFault::unit_mismatch:
      return "reply from another unit";
    case ResponseFault::function_mismatch:
      return "reply for another function";
    case ResponseFault::byte_count_mismatch:
      return "byte count does not match the request";
    case ResponseFault::unexpected_function:
      return "unexpected function code";
    case ResponseFault::trailing_bytes:
      return "bytes after the end of the frame";
  }
  return "unknown fault";
}

namespace {

Response invalid(ResponseFault fault, std::size_t frame_bytes) {
  Response r;
  r.status = ResponseStatus::invalid;
  r.fault = fault;
  r.frame_bytes = frame_bytes;
  return r;
}

}  // namespace

Response parse_read_response(std::span<const std::uint8_t> buffer, const ReadRequest& req) {
  if (buffer.size() < 2) return {};
  const std::uint8_t fn = buffer[1];
  std::size_t length = 0;
  if (fn & exception_bit) {
    length = 5;  // unit, function|0x80, exception code, CRC lo, CRC hi
  } else if (fn == fn_read_holding_registers || fn == fn_read_input_registers) {
    if (buffer.size() < 3) return {};
    const std::size_t byte_count = buffer[2];
    if (byte_count != 2u * req.count) {
      return invalid(ResponseFault::byte_count_mismatch, buffer.size());
    }
    length = 3 + byte_count + 2;
  } else {
    return invalid(ResponseFault::unexpected_function, buffer.size());
  }
  if (buffer.size() < length) return {};

  const auto frame = buffer.first(length);
  const std::uint16_t sent_crc =
      static_cast<std::uint16_t>(frame[length - 2] | (frame[length - 1] << 8));
  if (crc16_modbus(frame.first(length - 2)) != sent_crc) {
    return invalid(ResponseFault::crc_mismatch, length);
  }
  if (frame[0] != req.unit) return invalid(ResponseFault::unit_mismatch, length);
  if ((fn & 0x7F) != req.function) return invalid(ResponseFault::function_mismatch, length);

  Response r;
  r.frame_bytes = length;
  if (buffer.size() > length) r.fault = ResponseFault::trailing_bytes;
  if (fn & exception_bit) {
    r.status = ResponseStatus::exception;
    r.exception_code = frame[2];
    return r;
  }
  r.status = ResponseStatus::ok;
  r.registers.reserve(req.count);
  for (std::size_t i = 0; i < req.count; ++i) {
    r.registers.push_back(static_cast<std::uint16_t>((frame[3 + 2 * i] << 8) | frame[4 + 2 * i]));
  }
  return r;
}

std::size_t register_span(RegisterType t) {
  return (t == RegisterType::u16 || t == RegisterType::s16) ? 1 : 2;
}

std::string_view to_string(DecodeError e) {
  switch (e) {
    case DecodeError::out_of_block:
      return "register field outside the registers read";
    case DecodeError::not_finite:
      return "float register value is NaN or infinite";
  }
  return "unknown decode error";
}

Result<double, DecodeError> decode_register(std::span<const std::uint16_t> registers,
                                            const RegisterField& field) {
  const std::size_t n = register_span(field.type);
  if (field.index >= registers.size() || registers.size() - field.index < n) {
    return fail(DecodeError::out_of_block);
  }
  const std::uint16_t r0 = registers[field.index];
  std::uint32_t word32 = 0;
  if (n == 2) {
    const std::uint16_t r1 = registers[field.index + 1];
    word32 = field.order == WordOrder::high_word_first ? (std::uint32_t{r0} << 16) | r1
                                                       : (std::uint32_t{r1} << 16) | r0;
  }
  double raw = 0;
  switch (field.type) {
    case RegisterType::u16:
      raw = r0;
      break;
    case RegisterType::s16:
      raw = static_cast<std::int16_t>(r0);
      break;
    case RegisterType::u32:
      raw = word32;
      break;
    case RegisterType::s32:
      raw = static_cast<std::int32_t>(word32);
      break;
    case RegisterType::f32: {
      const float f = std::bit_cast<float>(word32);
      if (!std::isfinite(f)) return fail(DecodeError::not_finite);
      raw = f;
      break;
    }
  }
  const double value = raw * field.scale + field.offset;
  if (!std::isfinite(value)) return fail(DecodeError::not_finite);
  return value;
}

unsigned bits_per_character(const CharacterFrame& f) {
  return 1 + f.data_bits + (f.parity ? 1 : 0) + f.stop_bits;
}

namespace {

// ceil(tenths_of_chars / 10 * bits / baud) in microseconds, exact in integers.
std::chrono::microseconds char_time(unsigned tenths_of_chars, unsigned baud,
                                    const CharacterFrame& f) {
  const std::uint64_t num = std::uint64_t{tenths_of_chars} * bits_per_character(f) * 100000u;
  return std::chrono::microseconds((num + baud - 1) / baud);
}

}  // namespace

// Modbus over Serial Line V1.02 §2.5.1.1 (from memory): "If baud rate is greater
// than 19200 Bps, fixed values for the 2 timers should be used: it is recommended
// to use a value of 750us for the inter-character time-out (t1.5) and a value of
// 1.750ms for inter-frame delay (t3.5)."
std::chrono::microseconds silent_interval(unsigned baud, const CharacterFrame& f) {
  if (baud > 19200) return std::chrono::microseconds(1750);
  return char_time(35, baud, f);
}

std::chrono::microseconds inter_character_timeout(unsigned baud, const CharacterFrame& f) {
  if (baud > 19200) return std::chrono::microseconds(750);
  return char_time(15, baud, f);
}

}  // namespace tarn::protocol::modbus
