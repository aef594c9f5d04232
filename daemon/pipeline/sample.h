// The sample types that flow from the drivers through QC into windows.
// Pure data: no clock, no I/O. Times are UTC seconds since the Unix epoch.
#pragma once

#include <cstddef>
#include <cstdint>
#include <optional>

namespace tarn::pipeline {

// IOOS QARTOD primary flag scale.
enum class Flag : std::uint8_t {
  pass = 1,
  not_evaluated = 2,
  suspect = 3,
  fail = 4,
  missing = 9,
};

// Severity order used to combine flags: pass < not_evaluated < suspect < fail < missing.
// Position of a flag in severity order (and in per-flag count arrays):
// pass 0, not_evaluated 1, suspect 2, fail 3, missing 4.
constexpr std::size_t flag_index(Flag f) {
  switch (f) {
    case Flag::pass:
      return 0;
    case Flag::not_evaluated:
      return 1;
    case Flag::suspect:
      return 2;
    case Flag::fail:
      return 3;
    case Flag::missing:
      return 4;
  }
  return 4;
}

// REQUIRES: nothing. Returns the worse of the two.
constexpr Flag worse(Flag a, Flag b) {
  return flag_index(a) >= flag_index(b) ? a : b;
}

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
  Flag flag = Flag::not_evaluated;
  std::uint32_t reasons = 0;  // bit set, see reasons.h
};

}  // namespace tarn::pipeline
