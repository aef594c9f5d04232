// ChannelQc over longer series: fouling drift over several nights,
// maintenance resetting the reference, and state kept across a restart.
// Fouling drift is not a QARTOD test (no source: practice with in-situ
// fluorometers, whose optics gather biofilm between cleanings).
#include <catch2/catch.hpp>

#include <chrono>
#include <cmath>

#include "daemon/pipeline/channel_qc.h"
#include "daemon/pipeline/solar_position.h"
#include "tests/pipeline/helpers.h"

using namespace tarn::pipeline;
using tarn::codec::Flag;
using namespace tarn::pipeline::testing;

namespace {

// The invented point (demo/README.md: open North Sea, no lake there); it only
// fixes the sun.
constexpr double kLat = 55.10, kLon = 3.60;

std::int64_t jun1_2024() {
  namespace c = std::chrono;
  const c::sys_days d = c::year_month_day{c::year{2024}, c::month{6}, c::day{1}};
  return c::duration_cast<c::seconds>(d.time_since_epoch()).count();
}

// Baseline rising 0.3 ug/L per day (fouling), plus a daytime signal.
double fouled_value(std::int64_t t, std::int64_t t0) {
  const double days = static_cast<double>(t - t0) / 86400.0;
  const double elev = sun_position(static_cast<double>(t), kLat, kLon).elevation_deg;
  return 1.0 + 0.3 * days + (elev > 0 ? 2.0 * std::sin(elev * 3.14159265 / 180) : 0.0);
}

bool is_night(std::int64_t t) {
  return sun_position(static_cast<double>(t), kLat, kLon).elevation_deg < -6.0;
}

QcConfig fouling_config() {
  FoulingDriftParams f;
  f.max_rise = 0.5;
  f.night_below_deg = -6.0;
  f.min_night_samples = 10;
  QcConfig c = config_with({f}, 600);
  c.location = GeoPoint{kLat, kLon};
  return c;
}

}  // namespace

TEST_CASE("fouling drift: night baseline rising more than max_rise -> suspect", "[qc][fouling]") {
  const std::int64_t t0 = jun1_2024();
  ChannelQc qc(fouling_config());
  VectorSink sink;
  int sunrises = 0;
  bool was_night = false;
  std::int64_t third_sunrise = 0;
  for (std::int64_t t = t0; t < t0 + 4 * 86400; t += 600) {
    const bool night = is_night(t);
    if (was_night && !night && ++sunrises == 3) third_sunrise = t;
    was_night = night;
    qc.push({t, fouled_value(t, t0), 0}, sink);
  }
  REQUIRE(third_sunrise > 0);
  // Night 1 (00:00 to dawn on 1 June) gives the reference 1.0; night 2 begins
  // ~0.85 d later (baseline ~1.26, rise 0.26); night 3 ~1.85 d (~1.56, rise
  // 0.56 > 0.5): from the third dawn on, every sample is suspect.
  std::size_t before = 0, after = 0, not_evaluated = 0;
  for (const auto& s : sink.samples) {
    if (s.flag == Flag::not_evaluated) {
      ++not_evaluated;  // before the first night closed: no reference yet
      CHECK(s.t < third_sunrise);
    } else if (s.t < third_sunrise) {
      CHECK(s.flag == Flag::pass);
      CHECK_FALSE(s.reasons & reason::fouling_drift);
      ++before;
    } else {
      CHECK(s.flag == Flag::suspect);
      CHECK(s.reasons == reason::fouling_drift);
      ++after;
    }
  }
  CHECK(not_evaluated > 10);
  CHECK(before > 100);
  CHECK(after > 100);
  const QcSnapshot snap = qc.snapshot();
  REQUIRE(snap.fouling.size() == 1);
  REQUIRE(snap.fouling[0].reference.has_value());
  CHECK(*snap.fouling[0].reference == Approx(1.0).margin(0.01));
  CHECK(snap.fouling[0].drifted);

  SECTION("a restart keeps the reference and the drift") {
    const std::int64_t t_next = t0 + 4 * 86400;
    ChannelQc restarted(fouling_config());
    restarted.restore(snap);
    VectorSink s2;
    restarted.push({t_next - 600, 1.0, 0}, s2);  // at or before the saved last time: dropped
    CHECK(restarted.counters().dropped_out_of_order == 1);
    restarted.push({t_next, fouled_value(t_next, t0), 0}, s2);
    REQUIRE(s2.samples.size() == 1);
    CHECK(s2.samples[0].flag == Flag::suspect);
    CHECK(s2.samples[0].reasons == reason::fouling_drift);
  }

  SECTION("maintenance (cleaning) takes a new reference") {
    std::int64_t t = t0 + 4 * 86400;
    qc.begin_maintenance(t);
    qc.push({t, 1.0, 0}, sink);
    qc.end_maintenance(t + 1800);
    sink.samples.clear();
    // After cleaning the baseline is back to 1.0 and rises again 0.3/day; the
    // first night after cleaning is the new reference: no fouling flag for
    // the next two days.
    const std::int64_t clean = t + 1800;
    for (t = clean; t < clean + 2 * 86400; t += 600) {
      qc.push({t, fouled_value(t, clean), 0}, sink);
    }
    std::size_t suspect = 0, passed = 0;
    for (const auto& s : sink.samples) {
      suspect += s.flag == Flag::suspect;
      passed += s.flag == Flag::pass;
    }
    CHECK(suspect == 0);
    CHECK(passed > 100);
    CHECK(sink.samples.front().flag == Flag::not_evaluated);
  }
}

TEST_CASE("a restart keeps an open maintenance period", "[qc]") {
  GrossRangeParams g;
  g.sensor_min = 0;
  g.sensor_max = 100;
  ChannelQc qc(config_with({g}));
  VectorSink sink;
  qc.push({0, 5.0, 0}, sink);
  qc.begin_maintenance(30);
  const QcSnapshot snap = qc.snapshot();
  ChannelQc restarted(config_with({g}));
  restarted.restore(snap);
  CHECK(restarted.in_maintenance());
  restarted.push({60, 5.0, 0}, sink);
  restarted.end_maintenance(90);
  restarted.push({120, 5.0, 0}, sink);
  CHECK(flags_of(sink.samples) == "141");
  CHECK(sink.samples[1].reasons == reason::maintenance);
}

TEST_CASE("state stays bounded by the look-back, not by the samples pushed", "[qc]") {
  RateOfChangeParams roc;
  roc.period_s = 3600;
  AttenuatedSignalParams att;
  att.period_s = 3600;
  att.suspect_below = 0.01;
  FlatLineParams fl;
  fl.tolerance = 0.001;
  ChannelQc qc(config_with({roc, att, fl}));
  VectorSink sink;
  const std::size_t at_start = qc.state_bytes();
  for (std::int64_t i = 0; i < 100000; ++i) {
    qc.push({i * 60, std::sin(static_cast<double>(i) / 10.0), 0}, sink);
    if (i % 1000 == 0) sink.samples.clear();
  }
  CHECK(qc.state_bytes() == at_start);
  // 3600 s at 60 s: 62 slots of 16 bytes for rate of change, 3 x 62 for
  // attenuated signal (values, max queue, min queue).
  CHECK(at_start < 8 * 1024);
}
