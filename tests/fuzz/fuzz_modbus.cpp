// libFuzzer target: Modbus RTU response parsing and register decoding.
// Input: 3 bytes choosing the request (unit, function, count), then the bytes
// "received". Aborts if a value is ever returned for a frame whose CRC, unit or
// function does not match, or if the parser asks for more than a maximal frame.
#include <cstdint>
#include <cstdlib>
#include <span>

#include "drivers/protocol/crc.h"
#include "drivers/protocol/modbus_rtu.h"

using namespace tarn::protocol;

namespace {

void require(bool ok) {
  if (!ok) std::abort();
}

}  // namespace

extern "C" int LLVMFuzzerTestOneInput(const std::uint8_t* data, std::size_t size) {
  if (size < 3) return 0;
  const modbus::ReadRequest req{
      static_cast<std::uint8_t>(1 + data[0] % 247),
      (data[1] & 1) ? modbus::fn_read_input_registers : modbus::fn_read_holding_registers,
      static_cast<std::uint16_t>(data[1] >> 1), static_cast<std::uint16_t>(1 + data[2] % 125)};
  require(modbus::build_read_request(req).ok());
  const std::span<const std::uint8_t> rx(data + 3, size - 3);

  // Incremental use: every prefix, as a driver would see after each read.
  bool finished = false;
  for (std::size_t n = 0; n <= rx.size(); ++n) {
    const auto r = modbus::parse_read_response(rx.first(n), req);
    if (r.status == modbus::ResponseStatus::incomplete) {
      require(!finished);  // once decided, more bytes never make it incomplete again
      require(n < modbus::max_frame_bytes);
      require(r.registers.empty());
      continue;
    }
    finished = true;
    if (r.status != modbus::ResponseStatus::ok) {
      require(r.registers.empty());
      continue;
    }
    require(r.frame_bytes <= n);
    require(crc16_modbus(rx.first(r.frame_bytes)) == 0);  // residue of a good frame
    require(rx[0] == req.unit && rx[1] == req.function);
    require(r.registers.size() == req.count);
    for (std::size_t i = 0; i < r.registers.size(); ++i) {
      for (auto type :
           {modbus::RegisterType::u16, modbus::RegisterType::s16, modbus::RegisterType::u32,
            modbus::RegisterType::s32, modbus::RegisterType::f32}) {
        for (auto order : {modbus::WordOrder::high_word_first, modbus::WordOrder::low_word_first}) {
          (void)modbus::decode_register(r.registers, {i, type, order, 0.1, -5.0});
        }
      }
    }
  }
  return 0;
}
