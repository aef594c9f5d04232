// Rules of the wire format shared by the encoder and the decoder: code
// parameters, quantisation, time fields, flag runs and reason masks
// (codec/FORMAT.md §1, §4). Internal to codec/. Thread-safety: pure functions.
#pragma once

#include <bit>
#include <cmath>
#include <cstdint>
#include <optional>
#include <span>
#include <vector>

#include "codec/bit_io.h"
#include "codec/window.h"

namespace tarn::codec {

inline constexpr unsigned kRiceParamBits = 5;   // Rice parameter k: 0..31
inline constexpr unsigned kFlagGapOrder = 3;    // Exp-Golomb order of pass-run lengths
inline constexpr unsigned kStatsOrder = 2;      // Exp-Golomb order of statistic offsets
inline constexpr unsigned kReasonGapOrder = 3;  // Exp-Golomb order of reason slot gaps
inline constexpr std::int64_t kMaxQuant = (std::int64_t(1) << 53) - 1;
// Times are limited to 1900-01-01 .. 2300-01-01 UTC.
inline constexpr std::int64_t kMinTime = -2208988800;
inline constexpr std::int64_t kMaxTime = 10413792000;

constexpr bool within_time_range(std::int64_t t) {
  return t >= kMinTime && t <= kMaxTime;
}

// Round half away from zero of value / resolution; empty when not finite or
// when |q| would exceed 2^53 - 1.
inline std::optional<std::int64_t> quantise(double value, double resolution) {
  double x = value / resolution;
  if (!std::isfinite(x) || std::fabs(x) > 9.0e15) return std::nullopt;
  std::int64_t q = std::llround(x);
  if (q > kMaxQuant || q < -kMaxQuant) return std::nullopt;
  return q;
}
constexpr bool quant_in_range(std::int64_t q) {
  return q <= kMaxQuant && q >= -kMaxQuant;
}

// Window index field: windows since the one holding kTimeEpoch.
// REQUIRES: within_time_range(start).
constexpr std::int64_t window_index(std::int64_t start, std::uint32_t window_s) {
  return floor_div(start, window_s) - floor_div(kTimeEpoch, window_s);
}
// Inverse of window_index; empty outside the time range.
constexpr std::optional<std::int64_t> window_start(std::int64_t index, std::uint32_t window_s) {
  const std::int64_t limit = 20000000000LL / window_s + 1;
  if (index > limit || index < -limit) return std::nullopt;
  std::int64_t t = (index + floor_div(kTimeEpoch, window_s)) * std::int64_t(window_s);
  if (!within_time_range(t)) return std::nullopt;
  return t;
}

// A run of identical non-pass flags after `gap` pass slots.
struct FlagRun {
  std::uint32_t gap = 0;
  Flag flag = Flag::missing;
  std::uint32_t length = 0;
};

// 2-bit flag codes of FORMAT.md §4.2.
constexpr unsigned flag_code(Flag f) {
  return f == Flag::not_evaluated ? 0 : f == Flag::suspect ? 1 : f == Flag::fail ? 2 : 3;
}
inline constexpr Flag kFlagOfCode[4] = {Flag::not_evaluated, Flag::suspect, Flag::fail,
                                        Flag::missing};

inline void put_flag_runs(BitWriter& bw, const std::vector<FlagRun>& runs) {
  bw.put_bit(!runs.empty());
  if (runs.empty()) return;
  bw.put_eg(runs.size() - 1, 0);
  for (const FlagRun& r : runs) {
    bw.put_eg(r.gap, kFlagGapOrder);
    bw.put(flag_code(r.flag), 2);
    bw.put_eg(r.length - 1, 0);
  }
}

// Set-bit count (Exp-Golomb 0 of count - 1), then each set bit's position in
// 5 bits, ascending. REQUIRES: mask != 0.
inline void put_reason_mask(BitWriter& bw, std::uint32_t mask) {
  bw.put_eg(unsigned(std::popcount(mask)) - 1, 0);
  for (unsigned b = 0; b < 32; ++b)
    if (mask & (1u << b)) bw.put(b, 5);
}
inline void put_reason_mask_opt(BitWriter& bw, std::uint32_t mask) {
  bw.put_bit(mask != 0);
  if (mask) put_reason_mask(bw, mask);
}
inline std::optional<std::uint32_t> get_reason_mask(BitReader& br) {
  auto c = br.get_eg(0);
  if (!c || *c > 31) return std::nullopt;
  std::uint32_t mask = 0;
  int last = -1;
  for (std::uint64_t i = 0; i <= *c; ++i) {
    int b = int(br.get(5));
    if (b <= last) return std::nullopt;
    mask |= 1u << b;
    last = b;
  }
  return mask;
}

// The Rice parameter with the fewest bits for `z` (ties: the smaller k).
inline unsigned best_rice_parameter(std::span<const std::uint64_t> z) {
  std::uint64_t top = 0;
  for (std::uint64_t v : z) top |= v;
  const unsigned kmax = std::min(31u, unsigned(std::bit_width(top)));
  unsigned best_k = 0;
  std::uint64_t best = UINT64_MAX;
  for (unsigned k = 0; k <= kmax; ++k) {
    std::uint64_t bits = 0;
    for (std::uint64_t v : z) bits += rice_bits(v, k);
    if (bits < best) best = bits, best_k = k;
  }
  return best_k;
}

}  // namespace tarn::codec
