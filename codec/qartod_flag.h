// The QARTOD primary flag (IOOS QARTOD manuals): the one flag type of the
// station, used by the pipeline's QC, the store's archive and the codec's wire
// format. Pure values; no other header of ours.
#pragma once

#include <array>
#include <cstddef>
#include <cstdint>

namespace tarn::codec {

// IOOS QARTOD primary flags.
enum class Flag : std::uint8_t {
  pass = 1,
  not_evaluated = 2,
  suspect = 3,
  fail = 4,
  missing = 9,
};

// True for the five QARTOD values above.
constexpr bool is_valid_flag(std::uint8_t f) {
  return (f >= 1 && f <= 4) || f == 9;
}

// Position of a flag in severity order and in per-flag count arrays
// (ChannelStats::counts, WindowSummary::flag_counts): pass 0, not_evaluated 1,
// suspect 2, fail 3, missing 4. Severity order used to combine flags:
// pass < not_evaluated < suspect < fail < missing.
constexpr std::size_t flag_slot(Flag f) {
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
inline constexpr std::array<Flag, 5> kFlagsBySlot{Flag::pass, Flag::not_evaluated, Flag::suspect,
                                                  Flag::fail, Flag::missing};

// REQUIRES: nothing. Returns the worse of the two.
constexpr Flag worse(Flag a, Flag b) {
  return flag_slot(a) >= flag_slot(b) ? a : b;
}

}  // namespace tarn::codec
