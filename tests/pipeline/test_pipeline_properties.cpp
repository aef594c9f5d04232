// Random (seeded) abuse of a full channel pipeline: times jumping back and
// forth, NaN, missing values, status bits, maintenance toggles, timer calls.
// Whatever comes in, the invariants hold: samples leave in strictly
// increasing time, windows never overlap or repeat, every emitted sample is
// in exactly one window or counted as dropped, and flags agree with values.
#include <catch2/catch.hpp>

#include <cmath>
#include <random>

#include "daemon/pipeline/channel_pipeline.h"
#include "tests/pipeline/helpers.h"

using namespace tarn::pipeline;
using tarn::codec::Flag;
using namespace tarn::pipeline::testing;

namespace {

ChannelConfig everything() {
  QcConfig q;
  q.poll_interval_s = 60;
  q.location = GeoPoint{55.10, 3.60};
  TimingParams tp;
  tp.max_fill = 20;
  GrossRangeParams g;
  g.sensor_min = 0;
  g.sensor_max = 100;
  g.operator_max = 50;
  ClimatologyParams cl;
  cl.ranges = {{1, 0, 30}, {6, 0, 40}};
  SpikeParams sp;
  sp.suspect_threshold = 3;
  sp.fail_threshold = 6;
  RateOfChangeParams roc;
  roc.period_s = 3600;
  FlatLineParams fl;
  fl.tolerance = 0.01;
  AttenuatedSignalParams at;
  at.period_s = 1800;
  at.suspect_below = 0.1;
  SolarQuenchingParams sq;
  FoulingDriftParams fd;
  fd.max_rise = 1.0;
  fd.min_night_samples = 3;
  q.tests = {tp, InstrumentStatusParams{}, g, cl, sp, roc, fl, at, sq, fd};
  WindowConfig w;
  w.window_s = 600;
  w.median = true;
  w.include_suspect = true;
  w.max_empty_windows = 5;
  return {"x", q, w};
}

}  // namespace

TEST_CASE("pipeline invariants hold under random input", "[pipeline][property]") {
  for (std::uint64_t seed = 1; seed <= 40; ++seed) {
    std::mt19937_64 rng(seed);
    std::uniform_int_distribution<int> pick(0, 99);
    std::normal_distribution<double> val(10, 8);
    ChannelPipeline p(everything());
    ChannelPipeline::Output out;
    std::int64_t t = 1717200000 + static_cast<std::int64_t>(seed) * 977;
    p.start(t, out);
    for (int i = 0; i < 3000; ++i) {
      const int r = pick(rng);
      if (r < 3)
        t -= 60 * (1 + pick(rng));  // clock steps back
      else if (r < 5)
        t += 60 * (5 + pick(rng));  // a gap, sometimes a break
      else if (r < 8)
        t += 1 + pick(rng) / 4;  // jitter, early polls
      else
        t += 60;
      RawSample s{t, val(rng), 0};
      if (r == 10) s.value.reset();
      if (r == 11) s.value = std::nan("");
      if (r == 12) s.source_reasons = reason::instrument_status;
      if (r == 13) s.value = 1e300;
      if (r == 14) p.begin_maintenance(t);
      if (r == 15) p.end_maintenance(t);
      if (r == 16) p.advance(t + pick(rng) * 30, out);
      p.push(s, out);
    }
    p.stop(t + 60, out);
    INFO("seed " << seed);
    std::size_t in_windows = 0;
    for (std::size_t i = 0; i < out.windows.size(); ++i) {
      const WindowSummary& w = out.windows[i];
      CHECK(w.start % 600 == 0);
      CHECK(w.end == w.start + 600);
      if (i > 0) CHECK(w.start >= out.windows[i - 1].end);
      in_windows += w.total();
      if (w.stats) {
        CHECK(w.stats->count <= w.count(Flag::pass) + w.count(Flag::suspect));
        CHECK(w.stats->min <= w.stats->mean + 1e-9);
        CHECK(w.stats->mean <= w.stats->max + 1e-9);
        CHECK(std::isfinite(w.stats->sd));
      }
    }
    for (std::size_t i = 1; i < out.samples.size(); ++i)
      CHECK(out.samples[i].t > out.samples[i - 1].t);
    for (const auto& s : out.samples) {
      if (!s.value) CHECK(s.flag == Flag::missing);
      if (s.value) CHECK(std::isfinite(*s.value));
      if (s.flag == Flag::missing) CHECK_FALSE(s.value.has_value());  // flag 9: no value, ever
      if (s.reasons & reason::late) CHECK(s.flag == Flag::fail);
    }
    CHECK(in_windows + p.windows().counters().dropped_old == out.samples.size());
    CHECK(p.qc().counters().dropped_out_of_order > 0);
  }
}
