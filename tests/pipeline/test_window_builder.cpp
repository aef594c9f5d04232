// Windows aligned to UTC multiples of window_s: counts per flag, statistics
// over passed samples, the window flag rule, partial windows, and the rule
// that time going backwards never produces overlapping or duplicate windows.
#include <catch2/catch.hpp>

#include <cmath>
#include <set>

#include "daemon/pipeline/channel_pipeline.h"
#include "daemon/pipeline/window_builder.h"
#include "daemon/pipeline/window_collator.h"
#include "tests/pipeline/helpers.h"

using namespace tarn::pipeline;
using tarn::codec::Flag;
using namespace tarn::pipeline::testing;

namespace {

FlaggedSample fs(std::int64_t t, std::optional<double> v, Flag f, std::uint32_t r = 0) {
  return FlaggedSample{t, v, f, r};
}

WindowConfig cfg(bool median = false, bool include_suspect = false) {
  WindowConfig c;
  c.window_s = 600;
  c.median = median;
  c.include_suspect = include_suspect;
  return c;
}

void expect_unique_increasing(const std::vector<WindowSummary>& ws) {
  for (std::size_t i = 1; i < ws.size(); ++i) {
    CHECK(ws[i].start >= ws[i - 1].end);  // no overlap, no duplicate
  }
}

}  // namespace

TEST_CASE("window: aligned to UTC, partial at start, stats over passed samples", "[window]") {
  WindowBuilder b(cfg(true), 60);
  std::vector<WindowSummary> out;
  b.start(1000, out);
  b.push(fs(1000, 2.0, Flag::pass), out);
  b.push(fs(1060, 4.0, Flag::pass), out);
  b.push(fs(1120, 100.0, Flag::suspect, reason::spike), out);
  b.push(fs(1180, 200.0, Flag::fail, reason::gross_range_sensor), out);
  CHECK(out.empty());
  b.push(fs(1200, 7.0, Flag::pass), out);
  REQUIRE(out.size() == 1);
  const WindowSummary& w = out[0];
  CHECK(w.start == 600);
  CHECK(w.end == 1200);
  CHECK(w.partial);
  CHECK(w.covered_start == 1000);
  CHECK(w.expected_count == 4);  // 200 s covered at 60 s
  CHECK(w.flag_counts == std::array<std::uint32_t, 5>{2, 0, 1, 1, 0});
  CHECK(w.reasons == (reason::spike | reason::gross_range_sensor));
  REQUIRE(w.stats.has_value());
  CHECK(w.stats->count == 2);
  CHECK(w.stats->mean == Approx(3.0));
  CHECK(w.stats->min == 2.0);
  CHECK(w.stats->max == 4.0);
  CHECK(w.stats->sd == Approx(std::sqrt(2.0)));
  CHECK(w.stats->median == Approx(3.0));
  CHECK(w.stats->first_t == 1000);
  CHECK(w.stats->last_t == 1060);
  CHECK(w.flag == Flag::pass);  // 2 passed >= half of 4 expected

  // The next window is full: 4 passed of 10 expected -> suspect.
  for (std::int64_t t = 1260; t < 1800; t += 60)
    b.push(t < 1440 ? fs(t, 8.0, Flag::pass) : fs(t, std::nullopt, Flag::missing), out);
  b.advance(1800, out);
  REQUIRE(out.size() == 2);
  CHECK_FALSE(out[1].partial);
  CHECK(out[1].expected_count == 10);
  CHECK(out[1].count(Flag::pass) == 4);
  CHECK(out[1].count(Flag::missing) == 6);
  CHECK(out[1].total() == 10);
  CHECK(out[1].flag == Flag::suspect);
  CHECK(out[1].stats->median == Approx(8.0));  // 7, 8, 8, 8: mean of the middle two
}

TEST_CASE("window: median of an even and an odd count", "[window]") {
  for (int n : {4, 5}) {
    WindowBuilder b(cfg(true), 60);
    std::vector<WindowSummary> out;
    for (int i = 0; i < n; ++i) b.push(fs(i * 60, static_cast<double>(n - i), Flag::pass), out);
    b.advance(600, out);
    REQUIRE(out.size() == 1);
    REQUIRE(out[0].stats->median.has_value());
    CHECK(*out[0].stats->median == Approx(n == 4 ? 2.5 : 3.0));  // {1,2,3,4} -> 2.5, {1..5} -> 3
  }
}

TEST_CASE("window: suspect samples enter the stats only when configured", "[window]") {
  for (bool inc : {false, true}) {
    WindowBuilder b(cfg(false, inc), 60);
    std::vector<WindowSummary> out;
    b.push(fs(0, 1.0, Flag::pass), out);
    b.push(fs(60, 5.0, Flag::suspect), out);
    b.advance(600, out);
    REQUIRE(out.size() == 1);
    CHECK(out[0].stats->count == (inc ? 2u : 1u));
    CHECK(out[0].stats->mean == Approx(inc ? 3.0 : 1.0));
    CHECK(out[0].flag == Flag::suspect);  // 1 passed < 5 expected
  }
}

TEST_CASE("window flag rule: missing, fail, suspect, not evaluated", "[window]") {
  auto one_window = [](std::vector<FlaggedSample> samples) {
    WindowBuilder b(cfg(), 60);
    std::vector<WindowSummary> out;
    b.start(0, out);
    for (const auto& s : samples) b.push(s, out);
    b.advance(600, out);
    REQUIRE(out.size() == 1);
    return out[0];
  };
  CHECK(one_window({}).flag == Flag::missing);
  CHECK(
      one_window({fs(0, std::nullopt, Flag::missing), fs(60, std::nullopt, Flag::missing)}).flag ==
      Flag::missing);
  // A late sample keeps its value but fails (QARTOD test 1): values arrived, none usable.
  CHECK(one_window({fs(0, std::nullopt, Flag::missing), fs(60, 3.0, Flag::fail, reason::late)})
            .flag == Flag::fail);
  CHECK(one_window({fs(0, 3.0, Flag::fail), fs(60, 3.0, Flag::suspect)}).flag == Flag::fail);
  CHECK(one_window({fs(0, 3.0, Flag::suspect)}).flag == Flag::suspect);
  CHECK(one_window({fs(0, 3.0, Flag::not_evaluated)}).flag == Flag::not_evaluated);
  std::vector<FlaggedSample> five;
  for (int i = 0; i < 5; ++i) five.push_back(fs(i * 60, 1.0, Flag::pass));
  CHECK(one_window(five).flag == Flag::pass);  // 5 of 10: exactly half
  five.pop_back();
  CHECK(one_window(five).flag == Flag::suspect);
  CHECK_FALSE(one_window({fs(0, 3.0, Flag::fail)}).stats.has_value());
}

TEST_CASE("window: time going backwards drops samples, never re-opens a window", "[window]") {
  WindowBuilder b(cfg(), 60);
  std::vector<WindowSummary> out;
  for (std::int64_t t = 0; t < 1300; t += 60) b.push(fs(t, 1.0, Flag::pass), out);
  REQUIRE(out.size() == 2);
  // A clock step back by 20 minutes.
  for (std::int64_t t = 100; t < 1200; t += 60) b.push(fs(t, 1.0, Flag::pass), out);
  CHECK(b.counters().dropped_old == 19);
  for (std::int64_t t = 1300; t < 2500; t += 60) b.push(fs(t, 1.0, Flag::pass), out);
  std::set<std::int64_t> starts;
  for (const auto& w : out) CHECK(starts.insert(w.start).second);
  expect_unique_increasing(out);
}

TEST_CASE("window: a jump emits empty windows up to the cap and counts the rest", "[window]") {
  WindowConfig c = cfg();
  c.max_empty_windows = 2;
  WindowBuilder b(c, 60);
  std::vector<WindowSummary> out;
  b.push(fs(0, 1.0, Flag::pass), out);
  b.push(fs(5 * 600 + 10, 1.0, Flag::pass), out);
  REQUIRE(out.size() == 3);
  CHECK(out[0].start == 0);
  CHECK(out[1].start == 600);
  CHECK(out[1].flag == Flag::missing);
  CHECK(out[1].expected_count == 10);
  CHECK(out[2].start == 1200);
  CHECK(b.counters().skipped_windows == 2);  // 1800 and 2400
  b.advance(3600, out);
  REQUIRE(out.size() == 4);
  CHECK(out[3].start == 3000);
  expect_unique_increasing(out);
}

TEST_CASE("window: stop cuts short; a restart inside it waits for the next window", "[window]") {
  WindowBuilder a(cfg(), 60);
  std::vector<WindowSummary> out;
  a.start(0, out);
  for (std::int64_t t = 0; t < 300; t += 60) a.push(fs(t, 1.0, Flag::pass), out);
  a.stop(300, out);
  REQUIRE(out.size() == 1);
  CHECK(out[0].partial);
  CHECK(out[0].covered_end == 300);
  CHECK(out[0].expected_count == 5);
  CHECK(out[0].flag == Flag::pass);
  REQUIRE(a.last_closed_end() == 600);

  WindowBuilder b(cfg(), 60);  // after the restart
  b.restore(a.last_closed_end());
  b.start(360, out);
  for (std::int64_t t = 360; t < 1260; t += 60) b.push(fs(t, 1.0, Flag::pass), out);
  CHECK(b.counters().dropped_old == 4);  // 360..540 belong to a window already sent
  REQUIRE(out.size() == 2);
  CHECK(out[1].start == 600);
  CHECK_FALSE(out[1].partial);
  expect_unique_increasing(out);
}

TEST_CASE("pipeline: a window closes when the first poll after it settles its last sample",
          "[window][pipeline]") {
  GrossRangeParams g;
  g.sensor_min = 0;
  g.sensor_max = 100;
  SpikeParams sp;
  sp.suspect_threshold = 5;
  sp.fail_threshold = 9;
  ChannelConfig c{"chla", config_with({g, sp}), cfg()};
  ChannelPipeline p(c);
  ChannelPipeline::Output out;
  p.start(0, out);
  for (std::int64_t t = 0; t < 600; t += 60) p.push({t, t == 540 ? 30.0 : 2.0, 0}, out);
  CHECK(out.windows.empty());
  CHECK(out.samples.size() == 9);  // 540 is held for the spike test
  p.push({600, 2.0, 0}, out);
  REQUIRE(out.windows.size() == 1);
  const WindowSummary& w = out.windows[0];
  CHECK(w.total() == 10);
  // 540: |30 - (2 + 2)/2| = 28 > 9 -> fail. Its neighbour 480 is judged
  // against (2 + 30)/2 = 16: |2 - 16| = 14 > 9 -> fail too; the QARTOD spike
  // test marks a large spike's neighbours as well.
  CHECK(w.count(Flag::fail) == 2);
  CHECK(w.count(Flag::pass) == 8);
  CHECK(w.count(Flag::not_evaluated) == 0);
}

TEST_CASE("pipeline: a long gap is a break with partial windows on both sides",
          "[window][pipeline]") {
  GrossRangeParams g;
  g.sensor_min = 0;
  g.sensor_max = 100;
  TimingParams tp;
  tp.max_fill = 3;
  ChannelConfig c{"temp", config_with({tp, g}), cfg()};
  ChannelPipeline p(c);
  ChannelPipeline::Output out;
  p.start(0, out);
  for (std::int64_t t = 0; t <= 300; t += 60) p.push({t, 12.0, 0}, out);
  for (std::int64_t t = 3030; t <= 3630; t += 60) p.push({t, 12.0, 0}, out);
  REQUIRE(out.windows.size() == 2);
  CHECK(out.windows[0].start == 0);
  CHECK(out.windows[0].partial);
  CHECK(out.windows[0].covered_end == 360);
  CHECK(out.windows[0].expected_count == 6);
  CHECK(out.windows[0].flag == Flag::pass);
  CHECK(out.windows[1].start == 3000);
  CHECK(out.windows[1].partial);
  CHECK(out.windows[1].covered_start == 3030);
  CHECK(out.windows[1].expected_count == 10);  // 570 s at 60 s
  CHECK(out.windows[1].total() == 10);
  CHECK(p.qc().counters().breaks == 1);
}

TEST_CASE("pipeline: missed polls are counted as missing in the window", "[window][pipeline]") {
  GrossRangeParams g;
  g.sensor_min = 0;
  g.sensor_max = 100;
  TimingParams tp;
  ChannelConfig c{"pc", config_with({tp, g}), cfg()};
  ChannelPipeline p(c);
  ChannelPipeline::Output out;
  p.start(0, out);
  for (std::int64_t t : {0, 60, 120, 420, 480, 540, 600}) p.push({t, 1.0, 0}, out);
  REQUIRE(out.windows.size() == 1);
  CHECK(out.windows[0].count(Flag::missing) == 4);  // 180, 240, 300, 360
  CHECK(out.windows[0].count(Flag::pass) == 6);
  CHECK(out.windows[0].flag == Flag::pass);
  CHECK((out.windows[0].reasons & reason::timing_gap) != 0);
}

TEST_CASE("collator: one set per window start, released when all channels are there", "[window]") {
  WindowCollator col({"pc", "chla"}, 2);
  std::vector<WindowSet> sets;
  auto w = [](std::int64_t start) {
    WindowSummary s;
    s.start = start;
    s.end = start + 600;
    return s;
  };
  col.add("pc", w(0), sets);
  CHECK(sets.empty());
  col.add("chla", w(0), sets);
  REQUIRE(sets.size() == 1);
  CHECK(sets[0].channels.size() == 2);
  CHECK(sets[0].find("chla") != nullptr);
  col.add("pc", w(600), sets);
  col.add("pc", w(1200), sets);
  CHECK(sets.size() == 1);
  col.add("pc", w(1800), sets);  // a third pending set: more than 2 wait -> the oldest goes
  REQUIRE(sets.size() == 2);
  CHECK(sets[1].start == 600);
  CHECK(sets[1].find("chla") == nullptr);
  col.add("chla", w(600), sets);  // too late: already released
  CHECK(col.dropped() == 1);
  col.add("chla", w(1200), sets);
  REQUIRE(sets.size() == 3);
  CHECK(sets[2].start == 1200);
  CHECK(sets[2].channels.size() == 2);
  col.add("unknown", w(2400), sets);
  CHECK(col.dropped() == 2);
}

TEST_CASE("pipeline: stop, snapshot, restart in the same window: no window twice",
          "[window][pipeline]") {
  GrossRangeParams g;
  g.sensor_min = 0;
  g.sensor_max = 100;
  SpikeParams sp;
  sp.suspect_threshold = 5;
  sp.fail_threshold = 9;
  TimingParams tp;
  const ChannelConfig c{"chla", config_with({tp, g, sp}), cfg()};
  std::vector<WindowSummary> all;
  ChannelSnapshot saved;
  {
    ChannelPipeline p(c);
    ChannelPipeline::Output out;
    p.start(0, out);
    for (std::int64_t t = 0; t <= 900; t += 60) p.push({t, 2.0, 0}, out);
    p.stop(930, out);
    all.insert(all.end(), out.windows.begin(), out.windows.end());
    saved = p.snapshot();
  }
  REQUIRE(all.size() == 2);
  CHECK(all[1].partial);
  CHECK(all[1].covered_end == 930);
  CHECK(all[1].total() == 6);  // 600..900, the last one settled by stop()
  {
    ChannelPipeline p(c);  // restarted a minute later, inside the window already sent
    p.restore(saved);
    ChannelPipeline::Output out;
    p.start(990, out);
    for (std::int64_t t = 900; t <= 1860; t += 60) p.push({t, 2.0, 0}, out);  // 900: replayed
    all.insert(all.end(), out.windows.begin(), out.windows.end());
    CHECK(p.qc().counters().dropped_out_of_order == 1);
    CHECK(p.windows().counters().dropped_old == 4);  // 960..1140 belong to a window sent
  }
  REQUIRE(all.size() == 3);
  CHECK(all[2].start == 1200);
  CHECK_FALSE(all[2].partial);
  expect_unique_increasing(all);
}
