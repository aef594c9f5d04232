// The "modbus-rtu" driver: reads holding (03) or input (04) registers from one
// Modbus RTU server (unit) on a serial or RS-485 line. Built on protocol::modbus.
//
// Instrument options: {"unit": 1..247 (required), "function": 3 | 4 (default 3,
// channels may override), "max_registers": 1..125 (default 125: the most one
// request may read)}. Broadcast (unit 0) is never used for reads.
// Channel source: {"register": 0..65535 (protocol address, 0-based),
//   "type": "u16" | "s16" | "u32" | "s32" | "f32" (default u16),
//   "word_order": "high_first" (default) | "low_first" (32-bit types),
//   "function": 3 | 4, "scale": 1, "offset": 0}   value = raw * scale + offset,
// then the channel's calibration.
//
// A poll groups the channels of one function whose registers are contiguous or
// overlap into as few requests as possible (each at most max_registers). Before
// each request the line is drained and kept silent for t3.5; a CRC-valid frame
// from another unit or for another function (e.g. a late reply) is skipped, not
// taken as the answer; a bad CRC is retried (line "retries"). An exception reply
// makes the channels of that request instrument_error, with the exception's
// name in the error text; it is not retried.
#pragma once

#include "drivers/driver.h"

namespace tarn::drivers {

DriverFactory modbus_rtu_driver_factory();

}  // namespace tarn::drivers
