// The "sdi12" driver: one SDI-12 sensor behind a transparent SDI-12 serial
// adapter (the line runs at 1200 baud, 7 data bits, even parity, 1 stop bit).
// Built on protocol::sdi12.
//
// Instrument options: {"address": "0" (one character: 0-9, a-z, A-Z; default "0"),
//   "measure": "M" (default) | "MC" | "C" | "CC"   (C: concurrent; the second C:
//              data replies carry the SDI-12 CRC, which is verified),
//   "index": 0..9 (additional measurements aM1!..aM9!; default 0),
//   "send_break": true (default; the adapter or line is held in break before the
//              first try of each command; devices without break ignore it)}.
// Channel source: {"value": 0..29}: position in the values of the measurement.
//
// A poll: aM! (or the chosen variant) -> "atttn"; then it waits for the
// service request "a" (M variants) or the announced ttt seconds (C variants),
// at most ttt seconds of real time (the instrument's clock is not scaled);
// then aD0!, aD1!, ... until n values arrived. Each command follows the
// retry plan of protocol::sdi12::RetryPolicy: a break, the command, up to three
// retries; the cycle repeated 1 + line "retries" times; each try waits the
// line's timeout_ms for a reply. A data reply with a bad CRC is asked again
// within the same plan. An echo of the command (some adapters) is skipped.
// identify() (tarn probe) sends ?! (address query: only meaningful with one
// sensor on the bus) and aI!, and returns both answers.
#pragma once

#include "drivers/driver.h"

namespace tarn::drivers {

DriverFactory sdi12_driver_factory();

}  // namespace tarn::drivers
