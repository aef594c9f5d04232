#include "codec/window.h"

#include <algorithm>
#include <cmath>

namespace tarn::codec {

ChannelStats summarise(const ChannelWindow& c, std::int64_t start, std::uint32_t period_s,
                       bool passed_only) {
  ChannelStats s;
  const std::size_t n = c.flags.size();
  for (std::size_t i = 0; i < n; ++i) {
    s.counts[flag_slot(c.flags[i])]++;
    if (!c.reasons.empty()) s.reasons_any |= c.reasons[i];
  }
  // The basis: passed samples; without any, the not-evaluated ones (version 2).
  Flag basis = Flag::pass;
  if (!passed_only && s.counts[flag_slot(Flag::pass)] == 0 &&
      s.counts[flag_slot(Flag::not_evaluated)] > 0) {
    basis = Flag::not_evaluated;
    s.basis = StatsBasis::not_evaluated;
  }
  double sum = 0, lo = 0, hi = 0;
  std::size_t used = 0;
  for (std::size_t i = 0; i < n; ++i) {
    if (c.flags[i] != basis || !c.values[i]) continue;
    double v = *c.values[i];
    if (used == 0) {
      lo = hi = v;
      s.first_t = start + std::int64_t(i) * period_s;
    }
    lo = std::min(lo, v);
    hi = std::max(hi, v);
    s.last_t = start + std::int64_t(i) * period_s;
    sum += v;
    ++used;
  }
  if (used == 0) {
    s.basis = StatsBasis::used;
    return s;
  }
  double mean = sum / double(used);
  double ss = 0;
  for (std::size_t i = 0; i < n; ++i)
    if (c.flags[i] == basis && c.values[i]) ss += (*c.values[i] - mean) * (*c.values[i] - mean);
  s.mean = mean;
  s.min = lo;
  s.max = hi;
  s.sd = used > 1 ? std::sqrt(ss / double(used - 1)) : 0.0;
  return s;
}

}  // namespace tarn::codec
