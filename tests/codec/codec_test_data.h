// Shared test data for the codec tests: the demo station's manifest and random windows.
// Invented data (demo station "hollin-buoy-1" on the invented Lake Hollin).
#pragma once

#include <cmath>
#include <random>

#include "codec/decoder.h"
#include "codec/encoder.h"

namespace codec_test {

using namespace tarn::codec;

inline Manifest hollin_manifest(std::uint32_t period_s = 60, std::uint32_t window_s = 600) {
  Manifest m;
  m.station = "hollin-buoy-1";
  m.period_s = period_s;
  m.window_s = window_s;
  // Provenance of invented instruments; temp has no serial and no calibration date.
  m.channels = {
      {"chl", "chlorophyll-a", "ug/L", 0.01, "demo fluorometer A", 1.0, "TF-3 fluorometer",
       "TF3-0042", "2024-04-15"},
      {"pc", "phycocyanin", "ug/L", 0.01, "demo fluorometer B", 1.0, "TF-3 fluorometer", "TF3-0057",
       "2024-02-29"},
      {"pe", "phycoerythrin", "ug/L", 0.01, "demo fluorometer B", 1.0, "TF-3 fluorometer",
       "TF3-0057", "2024-02-29"},
      {"temp", "water temperature", "Cel", 0.001, "demo thermistor", 0.5, "TT-1 thermistor", "",
       ""},
  };
  m.latitude = 55.10;  // the invented point (demo/README.md): open North Sea
  m.longitude = 3.60;
  m.elevation_m = 142;
  return m;
}

inline CheckedManifest checked(Manifest m) {
  auto c = check_manifest(std::move(m));
  if (!c) throw std::runtime_error(c.error().message);
  return *c;
}

struct RandomShape {
  double p_missing = 0.02;
  double p_flagged = 0.03;  // not_evaluated / suspect / fail
  double p_reason = 0.5;    // of the non-pass slots
  double p_partial = 0.1;
  double p_all_missing = 0.05;  // per channel-window
  double noise = 5;             // in resolution steps
};

// Random window with all manifest channels; values near `level` (in steps) with noise.
inline Window random_window(std::mt19937_64& rng, const Manifest& m, std::int64_t start,
                            const RandomShape& s = {}) {
  std::uniform_real_distribution<double> u(0, 1);
  std::normal_distribution<double> noise(0, s.noise);
  const std::uint32_t n = m.slots_per_window();
  Window w;
  w.start = start;
  w.slots = n;
  if (u(rng) < s.p_partial) {
    w.partial = true;
    w.slots = 1 + std::uint32_t(rng() % n);
  }
  w.clock_unsynced = u(rng) < 0.05;
  for (const auto& ch : m.channels) {
    ChannelWindow c;
    const bool all_missing = u(rng) < s.p_all_missing;
    double level = (u(rng) - 0.3) * 4000;  // negative values too
    bool with_reasons = u(rng) < 0.5;
    for (std::uint32_t i = 0; i < w.slots; ++i) {
      Flag f = Flag::pass;
      double r = u(rng);
      if (all_missing || r < s.p_missing)
        f = Flag::missing;
      else if (r < s.p_missing + s.p_flagged)
        f = kFlagsBySlot[1 + rng() % 3];
      c.flags.push_back(f);
      level += noise(rng);
      if (u(rng) < 0.01) level += (u(rng) - 0.5) * 1e6;  // spike: exercises the Rice escape
      c.values.push_back(f == Flag::missing ? std::nullopt
                                            : std::optional<double>(level * ch.resolution));
      std::uint32_t reason = 0;
      if (f != Flag::pass && u(rng) < s.p_reason) reason = 1u << (rng() % 25);
      if (f == Flag::pass && u(rng) < 0.01) reason = 1u << 24;
      c.reasons.push_back(reason);
    }
    if (!with_reasons) c.reasons.clear();
    c.stats = summarise(c, w.start, m.period_s);
    w.channels.push_back(std::move(c));
  }
  return w;
}

// The window as a decoder returns it: values on the resolution grid, stats recomputed.
inline Window quantised(const Window& w, const Manifest& m) {
  Window q = w;
  for (std::size_t c = 0; c < q.channels.size(); ++c) {
    auto& ch = q.channels[c];
    const double res = m.channels[w.first_channel + c].resolution;
    for (auto& v : ch.values)
      if (v) v = double(std::llround(*v / res)) * res;
    bool any = false;
    for (auto r : ch.reasons) any |= r != 0;
    if (!any) ch.reasons.clear();
    ch.stats = summarise(ch, q.start, m.period_s);
  }
  return q;
}

}  // namespace codec_test
