// The sample types that flow from the drivers through QC into windows.
// Pure data: no clock, no I/O. Times are UTC seconds since the Unix epoch.
#pragma once

#include <cstddef>
#include <cstdint>
#include <optional>

#include "codec/qartod_flag.h"

namespace tarn::pipeline {

// What a driver hands over for one channel at one poll, after calibration.
struct RawSample {
  std::int64_t t = 0;                // poll time, UTC seconds
  std::optional<double> value;       // physical units; empty when no usable value
  std::uint32_t source_reasons = 0;  // reason bits set by the driver side (see reasons.h)
};

// A sample after QC.
struct FlaggedSample {
  std::int64_t t = 0;
  std::optional<double> value;
  codec::Flag flag = codec::Flag::not_evaluated;
  std::uint32_t reasons = 0;  // bit set, see reasons.h
};

}  // namespace tarn::pipeline
