// One QC test at a time, on hand-made series whose expected flags are written
// out. Each test follows a test of the U.S. IOOS QARTOD "Manual for Real-Time
// Quality Control of In-situ Temperature and Salinity Data" (v2.1, 2020),
// cited as "QARTOD T&S" with its test number; the numbering and wording are
// from memory. Parameter values are invented for the series unless marked.
#include <catch2/catch.hpp>

#include <chrono>
#include <cmath>

#include "config/settings/reason_names.h"
#include "daemon/pipeline/channel_qc.h"
#include "tests/pipeline/helpers.h"

using namespace tarn::pipeline;
using tarn::codec::Flag;
using namespace tarn::pipeline::testing;

namespace {

std::int64_t utc(int y, unsigned m, unsigned d, int hh = 0, int mm = 0) {
  namespace c = std::chrono;
  const c::sys_days date = c::year_month_day{c::year{y}, c::month{m}, c::day{d}};
  return c::duration_cast<c::seconds>(date.time_since_epoch()).count() + hh * 3600 + mm * 60;
}

std::vector<FlaggedSample> run_one(QcTestParams test, const std::vector<RawSample>& raw,
                                   std::int64_t interval = 60) {
  ChannelQc qc(config_with({std::move(test)}, interval));
  return run(qc, raw);
}

}  // namespace

TEST_CASE("gross range: sensor limits fail, operator limits suspect", "[qc]") {
  // QARTOD T&S test 4 (gross range): "data point exceeds sensor or operator
  // selected min/max" -> sensor limits give FAIL, operator limits SUSPECT.
  GrossRangeParams p;
  p.sensor_min = 0;
  p.sensor_max = 400;
  p.operator_min = 0.5;
  p.operator_max = 200;
  const auto out = run_one(p, series({5.0, -1.0, 0.0, 401.0, 150.0, 250.0, 400.0, std::nullopt}));
  CHECK(flags_of(out) == "14341339");
  CHECK(out[1].reasons == reason::gross_range_sensor);
  CHECK(out[2].reasons == reason::gross_range_operator);
  CHECK(out[0].reasons == 0);
  CHECK_FALSE(out[7].value.has_value());
}

TEST_CASE("climatology: range of the sample's month, suspect outside", "[qc]") {
  // QARTOD T&S test 5 (climatology): outside the seasonal range -> SUSPECT;
  // a period without a range cannot be tested -> NOT EVALUATED.
  ClimatologyParams p;
  p.ranges = {{1, 0.0, 10.0}, {7, 2.0, 60.0}};
  std::vector<RawSample> raw = {
      {utc(2024, 1, 15), 12.0, 0},         // January, above 10 -> 3
      {utc(2024, 1, 31, 23, 59), 9.0, 0},  // still January -> 1
      {utc(2024, 3, 1), 30.0, 0},          // March: no range -> 2
      {utc(2024, 7, 1), 30.0, 0},          // July, inside -> 1
      {utc(2024, 7, 2), 1.0, 0},           // July, below 2 -> 3
  };
  const auto out = run_one(p, raw, 3600);
  CHECK(flags_of(out) == "31213");
  CHECK(out[0].reasons == reason::climatology);
  CHECK(utc_month(utc(2024, 12, 31, 23, 59)) == 12);
  CHECK(utc_month(utc(2025, 1, 1)) == 1);
}

TEST_CASE("spike: sample against the mean of its neighbours", "[qc]") {
  // QARTOD T&S test 6 (spike): SPK_REF = (x[n-1] + x[n+1]) / 2;
  // |x[n] - SPK_REF| > THRSHLD_HIGH -> FAIL, > THRSHLD_LOW -> SUSPECT.
  // First and last samples have one neighbour only -> not evaluated.
  SpikeParams p;
  p.suspect_threshold = 5;
  p.fail_threshold = 9;
  // n1: |10-13|=3 -> 1; n2: |16-10|=6 -> 3; n4: |10-15|=5 (not above 5) -> 1;
  // n5: |20-10|=10 -> 4; n6: |10-15|=5 -> 1.
  const auto out = run_one(p, series({10.0, 10.0, 16.0, 10.0, 10.0, 20.0, 10.0, 10.0}));
  CHECK(flags_of(out) == "21311412");
  CHECK(out[2].reasons == reason::spike);
  CHECK(out[5].reasons == reason::spike);
}

TEST_CASE("spike: the verdict waits for the next poll; a missing neighbour leaves it open",
          "[qc]") {
  SpikeParams p;
  p.suspect_threshold = 5;
  p.fail_threshold = 9;
  ChannelQc qc(config_with({p}));
  VectorSink sink;
  qc.push({0, 10.0, 0}, sink);
  qc.push({60, 30.0, 0}, sink);
  CHECK(sink.samples.size() == 1);  // 30.0 is held until its right neighbour is known
  CHECK(qc.delivered_before() == 60);
  qc.push({120, std::nullopt, reason::no_reply}, sink);  // the next poll had no answer
  REQUIRE(sink.samples.size() == 3);
  CHECK(flags_of(sink.samples) == "229");  // 30.0 cannot be judged: not evaluated, not passed
  qc.push({180, 10.0, 0}, sink);
  qc.push({240, 10.0, 0}, sink);
  qc.push({300, 10.0, 0}, sink);
  qc.finish(sink);
  CHECK(flags_of(sink.samples) == "229212");  // 180 has a missing left neighbour
}

TEST_CASE("spike: advance() settles a held sample whose next poll is overdue", "[qc]") {
  SpikeParams p;
  p.suspect_threshold = 5;
  p.fail_threshold = 9;
  ChannelQc qc(config_with({p}));
  VectorSink sink;
  qc.push({0, 10.0, 0}, sink);
  qc.advance(60 + 30, sink);  // the next poll (due 60) is not yet 30 s late: still held
  CHECK(sink.samples.empty());
  qc.advance(60 + 31, sink);
  CHECK(flags_of(sink.samples) == "2");
}

TEST_CASE("rate of change: change above n_dev sd of the trailing period", "[qc]") {
  // QARTOD T&S test 7 (rate of change): |x[n] - x[n-1]| > N_DEV * SD, SD over
  // the trailing TIM_DEV period -> SUSPECT. The manual's example is N_DEV = 3
  // over 25 hours (from memory); here 3 over 600 s with at least 5 samples.
  RateOfChangeParams p;
  p.n_dev = 3;
  p.period_s = 600;
  p.min_count = 5;
  // 0-4: fewer than 5 in the period -> 2. 5 (9.8): sd of the 5 before = 0.114,
  // change 0.2 < 0.342 -> 1. 6 (13.0): sd 0.141, change 3.2 -> 3.
  // 7 (13.1): sd of 7 values ~1.2, change 0.1 -> 1.
  const auto out = run_one(p, series({10.0, 10.2, 9.9, 10.1, 10.0, 9.8, 13.0, 13.1}));
  CHECK(flags_of(out) == "22222131");
  CHECK(out[6].reasons == reason::rate_of_change);

  // The trailing period forgets: after a 10 min pause the look-back is empty.
  ChannelQc qc(config_with({p}));
  auto raw = series({10.0, 10.2, 9.9, 10.1, 10.0, 9.8});
  raw.push_back({360 + 700, 13.0, 0});
  CHECK(flags_of(run(qc, raw)) == "2222212");
}

TEST_CASE("flat line: the present value against REP_CNT previous values", "[qc]") {
  // QARTOD phytoplankton manual (2017), section 3.3, test 8: "This test
  // compares the present observation (PPn) to a number (REP_CNT_FAIL or
  // REP_CNT_SUSPECT) of previous observations"; codable instruction "For
  // i=1,REP_CNT_FAIL |PPn - PPn-i| < EPS" -> fail (suspect likewise). The
  // count is of previous observations: the present one is not included.
  // The manual's example counts: REP_CNT_SUSPECT = 3, REP_CNT_FAIL = 5.
  FlatLineParams p;
  p.suspect_count = 3;
  p.fail_count = 5;
  p.tolerance = 0.01;
  auto out = run_one(p, series({5.0, 5.001, 5.002, 5.003, 5.004, 5.005, 5.1, 5.1}));
  // index 3: 3 previous within EPS -> suspect; 4: 4 previous -> suspect;
  // 5: 5 previous -> fail. Index 2 has only 2 previous: pass.
  CHECK(flags_of(out) == "11133411");
  CHECK(out[2].flag == Flag::pass);  // present + 2 previous equal is not yet suspect
  CHECK(out[3].reasons == reason::flat_line);
  CHECK(out[5].reasons == reason::flat_line);
  // A slow drift is not a flat line: 5.012 is not within 0.01 of 5.000, so
  // the run at 5.012 counts 5.006 only.
  out = run_one(p, series({5.0, 5.006, 5.012, 5.018, 5.024}));
  CHECK(flags_of(out) == "11111");
}

TEST_CASE("attenuated signal: variation over the period below thresholds", "[qc]") {
  // QARTOD T&S test 10 (attenuated signal): "a near-flat-line test using the
  // range or standard deviation over a period (TST_TIM)": below MIN_VAR_WARN
  // -> SUSPECT, below MIN_VAR_FAIL -> FAIL.
  AttenuatedSignalParams p;
  p.period_s = 300;  // 5 polls at 60 s
  p.measure = VariationMeasure::range;
  p.suspect_below = 0.5;
  p.fail_below = 0.1;
  p.min_count = 5;
  // Windows (t-300, t]: idx4 [10,11,10,11,10] 1 -> 1 ... idx8 range 0.21 -> 3,
  // idx9 [10.2,10.2,10.21,10.2,10.22] range 0.02 -> 4.
  const auto out =
      run_one(p, series({10.0, 11.0, 10.0, 11.0, 10.0, 10.2, 10.2, 10.21, 10.2, 10.22}));
  CHECK(flags_of(out) == "2222111134");
  CHECK(out[9].reasons == reason::attenuated);

  // Same series with the standard deviation and thresholds 0.2 / 0.05:
  // idx4..7 sd >= 0.4 -> 1; idx8 sd 0.091 -> 3; idx9 sd 0.0089 -> 4.
  p.measure = VariationMeasure::sd;
  p.suspect_below = 0.2;
  p.fail_below = 0.05;
  const auto sd_out =
      run_one(p, series({10.0, 11.0, 10.0, 11.0, 10.0, 10.2, 10.2, 10.21, 10.2, 10.22}));
  CHECK(flags_of(sd_out) == "2222111134");
}

TEST_CASE("timing/gap: missed polls become samples flagged 9, never holes", "[qc]") {
  // QARTOD T&S test 1 (timing/gap): data not received when expected, or with
  // a wrong time stamp -> MISSING (9).
  GrossRangeParams g;
  g.sensor_min = 0;
  g.sensor_max = 100;
  TimingParams tp;
  tp.late_s = 10;
  tp.max_fill = 3;
  ChannelQc qc(config_with({tp, g}));
  VectorSink sink;
  for (std::int64_t t : {0, 60, 125, 240, 320, 360, 365, 1000}) qc.push({t, 5.0, 0}, sink);
  // 125: 5 s late, fine. 240: the poll due at 185 never came -> synthesised.
  // 320: 20 s off its due time 300 -> 4, reason late, value kept (QARTOD
  // phytoplankton manual 2017, section 3.3, test 1: data must have "the
  // correct time stamp", Fail=4). 365: a second sample for the poll due at
  // 360 -> 4 (late). 1000: 10 polls missed > max_fill 3 -> a break.
  std::vector<std::int64_t> times;
  for (const auto& s : sink.samples) times.push_back(s.t);
  CHECK(times == std::vector<std::int64_t>{0, 60, 125, 185, 240, 320, 360, 365, 1000});
  CHECK(flags_of(sink.samples) == "111914141");
  CHECK(sink.samples[3].reasons == reason::timing_gap);
  CHECK_FALSE(sink.samples[3].value.has_value());
  CHECK(sink.samples[5].reasons == reason::late);
  CHECK(sink.samples[5].flag == Flag::fail);
  CHECK(sink.samples[5].value.has_value());
  CHECK(sink.samples[7].reasons == reason::late);
  CHECK(*sink.samples[7].value == 5.0);
  REQUIRE(sink.breaks.size() == 1);
  CHECK(sink.breaks[0].last_before == 365);
  CHECK(sink.breaks[0].first_after == 1000);
  CHECK(qc.counters().synthesised_missing == 1);
  CHECK(qc.counters().breaks == 1);

  // advance(): the poll due at 1060 is overdue at 1071 -> synthesised; a reply
  // stamped 1060 that turns up afterwards is dropped and counted.
  sink.samples.clear();
  qc.advance(1070, sink);
  CHECK(sink.samples.empty());
  qc.advance(1071, sink);
  REQUIRE(sink.samples.size() == 1);
  CHECK(sink.samples[0].t == 1060);
  CHECK(sink.samples[0].flag == Flag::missing);
  qc.push({1060, 5.0, 0}, sink);
  CHECK(qc.counters().dropped_out_of_order == 1);
  CHECK(sink.samples.size() == 1);
}

TEST_CASE("instrument status: driver-reported bits fail or make suspect", "[qc]") {
  // defaults: instrument_status, garbled, offline -> fail; nothing -> suspect.
  // A warming-up sample is 2 (not evaluated) whatever the tests say: the
  // instrument has not settled (QARTOD's flag 2 "not evaluated").
  InstrumentStatusParams p;
  std::vector<RawSample> raw = {
      {0, 5.0, 0},
      {60, 5.0, reason::instrument_status},
      {120, 5.0, reason::warming_up},
      {180, std::nullopt, reason::no_reply},
      {240, 5.0, reason::clock_unsynced},  // not a status bit: kept, no effect on the flag
      {300, 5.0, reason::warming_up | reason::instrument_status},  // worse than 2 stays worse
  };
  const auto out = run_one(p, raw);
  CHECK(flags_of(out) == "142914");
  CHECK(out[2].reasons == reason::warming_up);
  CHECK(out[1].reasons == reason::instrument_status);
  CHECK(out[3].reasons == reason::no_reply);
  CHECK(out[4].reasons == reason::clock_unsynced);
}

TEST_CASE("warm-up: a passing sample taken while warming up is 2, with any test", "[qc]") {
  // Issue 3: samples within an instrument's warm-up are flagged not evaluated
  // (QARTOD 2); a test that finds worse still decides (gross range -> 4).
  GrossRangeParams p;
  p.sensor_min = 0;
  p.sensor_max = 100;
  const auto out =
      run_one(p, {{0, 5.0, reason::warming_up}, {60, 500.0, reason::warming_up}, {120, 5.0, 0}});
  CHECK(flags_of(out) == "241");
  CHECK(out[0].reasons == reason::warming_up);
  CHECK(out[1].reasons == (reason::warming_up | reason::gross_range_sensor));
}

TEST_CASE("solar quenching: sun above the configured elevation -> suspect", "[qc][solar]") {
  SolarQuenchingParams p;
  p.suspect_above_deg = 20;
  QcConfig c = config_with({p}, 3600);
  c.location = GeoPoint{55.10, 3.60};
  ChannelQc qc(c);
  // 21 June 2024 at 47 N, 8 E: 11:00 UTC the sun is ~66 deg high, 23:00 UTC
  // below the horizon, 05:00 UTC ~13 deg (from sun_position, checked against
  // ephem and the NREL SPA in test_solar_position.cpp).
  std::vector<RawSample> raw = {{utc(2024, 6, 21, 5), 3.0, 0},
                                {utc(2024, 6, 21, 11), 2.0, 0},
                                {utc(2024, 6, 21, 23), 3.0, 0}};
  const auto out = run(qc, raw);
  CHECK(flags_of(out) == "131");
  CHECK(out[1].reasons == reason::solar_quenching);
}

TEST_CASE("the sample's flag is the worst of the tests that ran", "[qc]") {
  GrossRangeParams g;
  g.sensor_min = 0;
  g.sensor_max = 100;
  g.operator_max = 50;
  ClimatologyParams clim;
  clim.ranges = {{1, 0, 10}};  // January only
  FlatLineParams fl;
  fl.suspect_count = 2;
  fl.fail_count = 3;
  fl.tolerance = 0.001;
  // Samples in 1970-01 (t from 0): climatology runs; gross range pass +
  // climatology suspect -> 3; gross suspect + climatology suspect -> 3 with
  // both reasons; flat line fail (3 previous equal values) dominates.
  ChannelQc qc(config_with({g, clim, fl}));
  const auto out = run(qc, series({5.0, 12.0, 60.0, 60.0, 60.0, 60.0}));
  CHECK(flags_of(out) == "133334");
  CHECK(out[2].reasons == (reason::gross_range_operator | reason::climatology));
  CHECK(out[4].reasons == (reason::gross_range_operator | reason::climatology | reason::flat_line));
  CHECK(out[5].reasons == (reason::gross_range_operator | reason::climatology | reason::flat_line));

  // A test that could not run (climatology in March) does not hide a pass.
  ChannelQc qc2(config_with({g, clim}));
  const auto march = run(qc2, {{utc(2024, 3, 1), 5.0, 0}});
  CHECK(flags_of(march) == "1");
  // No test could run at all -> 2.
  ChannelQc qc3(config_with({clim}));
  CHECK(flags_of(run(qc3, {{utc(2024, 3, 1), 5.0, 0}})) == "2");
  ChannelQc none(config_with({}));
  CHECK(flags_of(run(none, series({1.0, std::nullopt}))) == "29");
}

TEST_CASE("order: look-back tests skip samples an earlier test failed", "[qc]") {
  GrossRangeParams g;
  g.sensor_min = 0;
  g.sensor_max = 100;
  FlatLineParams fl;
  fl.suspect_count = 2;
  fl.fail_count = 6;
  fl.tolerance = 0.01;
  const auto raw = series({5.0, 150.0, 5.0, 150.0, 5.0});
  // gross range first: the 150s (fail) never enter the flat-line look-back,
  // so the three 5.0s are consecutive for it -> the last (2 previous) is suspect.
  ChannelQc gross_first(config_with({g, fl}));
  CHECK(flags_of(run(gross_first, raw)) == "14143");
  // flat line first: it sees 5,150,5,150,5 -> no run.
  ChannelQc flat_first(config_with({fl, g}));
  CHECK(flags_of(run(flat_first, raw)) == "14141");
}

TEST_CASE("maintenance: samples during a period fail with the maintenance reason", "[qc]") {
  GrossRangeParams g;
  g.sensor_min = 0;
  g.sensor_max = 100;
  ChannelQc qc(config_with({g}));
  VectorSink sink;
  qc.push({0, 5.0, 0}, sink);
  qc.push({60, 5.0, 0}, sink);
  qc.begin_maintenance(120);
  CHECK(qc.in_maintenance());
  qc.push({120, 5.0, 0}, sink);
  qc.push({180, std::nullopt, reason::offline}, sink);  // instrument out of the water
  qc.end_maintenance(200);
  qc.push({240, 5.0, 0}, sink);
  CHECK(flags_of(sink.samples) == "11491");
  CHECK(sink.samples[2].reasons == reason::maintenance);
  CHECK_FALSE(qc.in_maintenance());
  const QcSnapshot s = qc.snapshot();
  REQUIRE(s.last_maintenance.has_value());
  CHECK(s.last_maintenance->start == 120);
  CHECK(s.last_maintenance->end == 200);
}

TEST_CASE("a NaN or infinite value from a driver is garbage, flagged 9", "[qc]") {
  GrossRangeParams g;
  g.sensor_min = 0;
  g.sensor_max = 100;
  ChannelQc qc(config_with({g}));
  const auto out = run(qc, series({1.0, std::nan(""), HUGE_VAL, 2.0}));
  CHECK(flags_of(out) == "1991");
  CHECK_FALSE(out[1].value.has_value());
  CHECK(out[1].reasons == reason::garbled);
  CHECK(out[2].reasons == reason::garbled);
}

TEST_CASE("reason names round-trip", "[qc]") {
  for (int i = 0; i < 32; ++i) {
    const std::uint32_t bit = 1u << i;
    const auto name = reason_name(bit);
    if (name.empty()) continue;
    CHECK(reason_from_name(name) == bit);
  }
  CHECK(reason_list(reason::spike | reason::flat_line | (1u << 30)) == "spike,flat_line,bit30");
  CHECK_FALSE(reason_from_name("nonsense").has_value());
}

TEST_CASE("parameter problems name the field and what is allowed", "[qc]") {
  SpikeParams sp;
  sp.suspect_threshold = 5;
  sp.fail_threshold = 2;
  SolarQuenchingParams sq;
  QcConfig c = config_with({GrossRangeParams{}, sp, sq});
  const auto problems = check_qc_config(c);
  REQUIRE(problems.size() == 3);
  CHECK(problems[0].where == "/tests/0/sensor_max");
  CHECK(problems[1].where == "/tests/1/fail_threshold");
  CHECK(problems[1].message == "must be >= suspect_threshold");
  CHECK(problems[2].where == "/location");
  CHECK_THROWS_AS(ChannelQc(c), std::invalid_argument);
  CHECK(test_kind(c.tests[1]) == "spike");
}
