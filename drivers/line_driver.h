// The "line" driver: instruments that answer a poll command with one line of
// ASCII text, or stream lines unasked. Built on protocol::line (LineSplitter
// with a length cap, FieldMapper).
//
// Instrument options ("options" block; all optional):
//   "poll":      text sent before each read, e.g. "MEAS\r\n". Absent: streaming
//                mode; the driver reads what the instrument sent unasked and
//                takes the newest complete line (the first, possibly cut,
//                fragment after the previous poll is skipped), waiting up to the
//                line's timeout_ms for one if none is pending.
//   "delimiter": one character: "," (default) ";" "\t" " ", or "whitespace"
//                (runs of blanks).
//   "pattern":   an ECMAScript regular expression; fields are its capture groups
//                (1-based). Excludes "delimiter".
//   "checksum":  "none" (default) | "nmea" (a "*hh" XOR checksum is required) |
//                "nmea_if_present" (verified when present).
//   "prefix":    lines that do not start with this text are ignored.
//   "max_line":  line length cap in bytes, 8..4096 (default 256); longer lines
//                are dropped, so a babbling instrument cannot grow memory.
//   "status":    {"field": N, "ok": [0]}: a numeric status field; a value not in
//                "ok" makes every channel instrument_error.
// Channel source: {"field": N} (0-based field index, or group number with
// "pattern"). A field that is absent, empty or not a number makes that channel
// garbled; the raw line goes to the debug log. A failed checksum or a line the
// pattern does not match makes every channel garbled.
#pragma once

#include "drivers/driver.h"

namespace tarn::drivers {

DriverFactory line_driver_factory();

}  // namespace tarn::drivers
