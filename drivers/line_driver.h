// The "line" driver: instruments that answer a poll command with one line of
// ASCII text, or stream lines unasked (no poll command). Fields are split by a
// delimiter and mapped to channels by index.
#pragma once

#include "drivers/driver.h"

namespace tarn::drivers {

DriverFactory line_driver_factory();

}  // namespace tarn::drivers
