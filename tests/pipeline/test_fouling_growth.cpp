// Fouling drift against growth: a multi-day bloom whose night minimum rises
// day after day is not fouling; a slow steady drift (a biofilm) is. The rule
// (qc_params.h, FoulingDriftParams) is ours: not a QARTOD test, common
// practice, no source. The series are generated here (simulated time); the
// sun comes from the project's solar code at an invented point, 55.10 N
// 3.60 E (open North Sea: no lake is there; the project's invented place).
#include <catch2/catch.hpp>

#include <chrono>
#include <cmath>
#include <vector>

#include "daemon/pipeline/channel_qc.h"
#include "daemon/pipeline/solar_position.h"
#include "tests/pipeline/helpers.h"

using namespace tarn::pipeline;
using tarn::codec::Flag;
using namespace tarn::pipeline::testing;

namespace {

constexpr double kLat = 55.10, kLon = 3.60;  // invented point (see above)

std::int64_t utc_day(int y, unsigned m, unsigned d) {
  namespace c = std::chrono;
  const c::sys_days day = c::year_month_day{c::year{y}, c::month{m}, c::day{d}};
  return c::duration_cast<c::seconds>(day.time_since_epoch()).count();
}

double elevation(std::int64_t t) {
  return sun_position(static_cast<double>(t), kLat, kLon).elevation_deg;
}

// A daytime rise on top of the night baseline (more light, more signal).
double daytime(std::int64_t t) {
  const double e = elevation(t);
  return e > 0 ? 1.5 * std::sin(e * 3.14159265358979 / 180) : 0.0;
}

QcConfig config(double max_rise, std::int64_t poll_s, std::uint32_t min_night) {
  FoulingDriftParams f;
  f.max_rise = max_rise;
  f.night_below_deg = -6.0;
  f.min_night_samples = min_night;
  QcConfig c = config_with({f}, poll_s);
  c.location = GeoPoint{kLat, kLon};
  return c;
}

// Times of the sunrises (sun crossing -6 deg upwards) in [t0, t1).
std::vector<std::int64_t> dawns(std::int64_t t0, std::int64_t t1, std::int64_t step) {
  std::vector<std::int64_t> out;
  bool night = elevation(t0) < -6;
  for (std::int64_t t = t0; t < t1; t += step) {
    const bool n = elevation(t) < -6;
    if (night && !n) out.push_back(t);
    night = n;
  }
  return out;
}

}  // namespace

TEST_CASE("fouling drift: a bloom whose night minimum rises 1 -> 3 -> 8 is not fouling",
          "[qc][fouling]") {
  // Phycocyanin, ug/L. The night baseline steps up at noon (algae grow by
  // day): nights 0 and 1 at 1, night 2 at 3, night 3 at 8, night 4 at 8.5.
  const std::int64_t t0 = utc_day(2026, 9, 1);
  const std::vector<double> night_base = {1.0, 1.0, 3.0, 8.0, 8.5, 8.5};
  auto value = [&](std::int64_t t) {
    const auto k = static_cast<std::size_t>((t - t0 + 43200) / 86400);  // switches at noon
    return night_base[k] + daytime(t);
  };
  ChannelQc qc(config(1.0, 600, 10));
  VectorSink sink;
  for (std::int64_t t = t0; t < t0 + 5 * 86400; t += 600) qc.push({t, value(t), 0}, sink);
  qc.finish(sink);
  std::size_t passed = 0, fouled = 0;
  for (const auto& s : sink.samples) {
    passed += s.flag == Flag::pass;
    fouled += (s.reasons & reason::fouling_drift) != 0;
  }
  CHECK(fouled == 0);
  CHECK(passed > 400);  // the test ran (a reference was taken) and passed the samples
  // The reference followed the growth: 1 + 2 + 5 = 8, drift 8.5 - 8 = 0.5 <= 1.
  const QcSnapshot snap = qc.snapshot();
  REQUIRE(snap.fouling.size() == 1);
  REQUIRE(snap.fouling[0].reference.has_value());
  CHECK(*snap.fouling[0].reference == Approx(8.0).margin(1e-9));
  CHECK_FALSE(snap.fouling[0].drifted);

  SECTION("without the growth rule (growth_fraction huge) the same bloom is taken for fouling") {
    QcConfig c = config(1.0, 600, 10);
    std::get<FoulingDriftParams>(c.tests[0]).growth_fraction = 10;
    ChannelQc naive(c);
    VectorSink s2;
    for (std::int64_t t = t0; t < t0 + 5 * 86400; t += 600) naive.push({t, value(t), 0}, s2);
    std::size_t f2 = 0;
    for (const auto& s : s2.samples) f2 += (s.reasons & reason::fouling_drift) != 0;
    CHECK(f2 > 100);
  }
}

TEST_CASE("fouling drift: a biofilm of +0.3 ug/L a night on a 2 ug/L baseline is flagged",
          "[qc][fouling]") {
  // Continuous drift: value = 2 + 0.3 per day + daytime signal. Night k's
  // minimum is at its start (~0.2 d before midnight): nights 0..4 give about
  // 2.0, 2.24, 2.54, 2.84, 3.14; each rise (0.24..0.3) is far below half the
  // baseline, so it is drift: 0.84 after night 3, 1.14 > max_rise 1.0 after
  // night 4, whose dawn is the fifth dawn from t0 (00:00, inside night 0).
  const std::int64_t t0 = utc_day(2026, 9, 1);
  auto value = [&](std::int64_t t) {
    return 2.0 + 0.3 * static_cast<double>(t - t0) / 86400.0 + daytime(t);
  };
  const std::int64_t t1 = t0 + 6 * 86400;
  const auto dawn = dawns(t0, t1, 600);
  REQUIRE(dawn.size() >= 6);
  ChannelQc qc(config(1.0, 600, 10));
  VectorSink sink;
  for (std::int64_t t = t0; t < t1; t += 600) qc.push({t, value(t), 0}, sink);
  qc.finish(sink);
  std::size_t early_flags = 0, late_flags = 0, late = 0;
  for (const auto& s : sink.samples) {
    const bool f = (s.reasons & reason::fouling_drift) != 0;
    if (s.t < dawn[4]) {
      early_flags += f;
    } else {
      ++late;
      late_flags += f;
      CHECK(s.flag == Flag::suspect);
    }
  }
  CHECK(early_flags == 0);
  CHECK(late > 100);
  CHECK(late_flags == late);
  const QcSnapshot snap = qc.snapshot();
  REQUIRE(snap.fouling[0].reference.has_value());
  CHECK(*snap.fouling[0].reference == Approx(2.0).margin(0.01));  // never moved by growth
}

TEST_CASE(
    "fouling drift: a fast biofilm (1.5 ug/L a day on 4 ug/L, the demo's jetty) is flagged "
    "from the second night",
    "[qc][fouling]") {
  // June at the invented point: short nights (sun below -6 deg for ~4 h).
  // Poll 300 s, at least 12 night samples, max_rise 1.0: the jetty's
  // settings. Night 0 (00:00 to dawn) gives ~4.0; night 1 ~5.4: a rise of
  // ~1.4, a third of the baseline: drift, above 1.0 -> flagged from dawn 1.
  const std::int64_t t0 = utc_day(2026, 6, 20);
  auto value = [&](std::int64_t t) {
    return 4.0 + 1.5 * static_cast<double>(t - t0) / 86400.0 + daytime(t);
  };
  const auto dawn = dawns(t0, t0 + 2 * 86400, 300);
  REQUIRE(dawn.size() == 2);
  ChannelQc qc(config(1.0, 300, 12));
  VectorSink sink;
  for (std::int64_t t = t0; t < t0 + 2 * 86400; t += 300) qc.push({t, value(t), 0}, sink);
  std::size_t day0 = 0, day1 = 0;
  for (const auto& s : sink.samples) {
    const bool f = (s.reasons & reason::fouling_drift) != 0;
    (s.t < t0 + 86400 ? day0 : day1) += f;
    if (s.t >= dawn[1]) CHECK(f);
  }
  CHECK(day0 == 0);
  CHECK(day1 > 200);
}

TEST_CASE("fouling drift: max_rise_per_night caps the rise that counts as drift", "[qc][fouling]") {
  // +0.8 a night on a 10 ug/L baseline is 8 %: drift by the fraction rule;
  // with max_rise_per_night 0.5 each such rise is growth and never counts.
  const std::int64_t t0 = utc_day(2026, 9, 1);
  auto value = [&](std::int64_t t) {
    return 10.0 + 0.8 * static_cast<double>(t - t0) / 86400.0 + daytime(t);
  };
  auto count_flags = [&](std::optional<double> cap) {
    QcConfig c = config(1.0, 600, 10);
    std::get<FoulingDriftParams>(c.tests[0]).max_rise_per_night = cap;
    ChannelQc qc(c);
    VectorSink sink;
    for (std::int64_t t = t0; t < t0 + 4 * 86400; t += 600) qc.push({t, value(t), 0}, sink);
    std::size_t n = 0;
    for (const auto& s : sink.samples) n += (s.reasons & reason::fouling_drift) != 0;
    return n;
  };
  CHECK(count_flags(std::nullopt) > 100);
  CHECK(count_flags(0.5) == 0);
}
