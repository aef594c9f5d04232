#include "codec/window.h"

#include <algorithm>
#include <cmath>

namespace tarn::codec {

ChannelStats summarise(const ChannelWindow& c, std::int64_t start, std::uint32_t period_s) {
  ChannelStats s;
  const std::size_t n = c.flags.size();
  double sum = 0, lo = 0, hi = 0;
  std::size_t passed = 0;
  for (std::size_t i = 0; i < n; ++i) {
    s.counts[flag_slot(c.flags[i])]++;
    if (!c.reasons.empty()) s.reasons_any |= c.reasons[i];
    if (c.flags[i] != Flag::pass || !c.values[i]) continue;
    double v = *c.values[i];
    if (passed == 0) {
      lo = hi = v;
      s.first_t = start + std::int64_t(i) * period_s;
    }
    lo = std::min(lo, v);
    hi = std::max(hi, v);
    s.last_t = start + std::int64_t(i) * period_s;
    sum += v;
    ++passed;
  }
  if (passed == 0) return s;
  double mean = sum / double(passed);
  double ss = 0;
  for (std::size_t i = 0; i < n; ++i)
    if (c.flags[i] == Flag::pass && c.values[i])
      ss += (*c.values[i] - mean) * (*c.values[i] - mean);
  s.mean = mean;
  s.min = lo;
  s.max = hi;
  s.sd = passed > 1 ? std::sqrt(ss / double(passed - 1)) : 0.0;
  return s;
}

}  // namespace tarn::codec
