// Small pieces every instrument driver uses: calibrating a raw value into a
// ChannelReading, turning a transport outcome into a ReadProblem, a named
// logger per driver, and hex text for the exchange log.
// Thread-safety: pure functions.
#pragma once

#include <spdlog/spdlog.h>

#include "drivers/os/logging.h"

#include <cstdint>
#include <memory>
#include <span>
#include <string>

#include "drivers/calibration_config.h"
#include "drivers/reading.h"
#include "drivers/serial_port.h"

namespace tarn::drivers {

// Applies `cal` to `raw`. A calibration error gives no value, problem garbled,
// and sets `error` to e.g. "chan: calibration: out of domain (raw 1e+06)".
ChannelReading calibrated(const Calibration& cal, double raw, const std::string& channel,
                          std::string& error);

// Every channel of `r` gets `p`; `r.error` becomes `why`.
void fail_all(PollResult& r, ReadProblem p, std::string why);

// reply -> none; timeout -> no_reply; invalid -> garbled; port_lost -> offline.
ReadProblem problem_of(Transaction::Outcome o);

// "01 03 00 6b" (lower case, space separated).
std::string hex(std::span<const std::uint8_t> bytes);
// Printable ASCII as is, CR as \r, LF as \n, others as \xHH.
std::string printable(std::span<const std::uint8_t> bytes);

}  // namespace tarn::drivers
