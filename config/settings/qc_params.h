// Parameters of the per-channel QC tests: plain structs with plain field names,
// so that config/ can fill them from JSON one field at a time. A channel's QC
// is an ordered list of tests (QcConfig::tests); see channel_qc.h for how the
// order matters. Test numbers are those of the U.S. IOOS QARTOD manuals:
//  - PP: "Manual for Real-Time Quality Control of Phytoplankton Data",
//    version 1.0, May 2017, section 3.3 (tests 1 to 11). Checked against the
//    manual's text for tests 1, 4, 5, 6, 7, 8 and 10 (the fluorometer channels).
//  - TS: "Manual for Real-Time Quality Control of In-situ Temperature and
//    Salinity Data" (version 2.1, 2020): same numbers for tests 1 to 10
//    (from memory; its text was not at hand). The ocean-optics manual was not
//    at hand either; nothing here is checked against it.
// Default values are marked as from memory or as common practice; a station
// sets its own.
#pragma once

#include <cstdint>
#include <optional>
#include <string>
#include <string_view>
#include <variant>
#include <vector>

#include "config/settings/reasons.h"

namespace tarn::pipeline {

struct GeoPoint {
  double latitude_deg = 0;   // north positive
  double longitude_deg = 0;  // east positive
};

// QARTOD test 4 (gross range; PP section 3.3 test 4, checked; TS test 4 from
// memory): outside the sensor's span (PP_SENSOR_MIN/MAX) -> fail (4), outside
// the operator's span (PP_USER_MIN/MAX) -> suspect (3).
struct GrossRangeParams {
  static constexpr std::string_view kind = "gross_range";
  double sensor_min = 0;
  double sensor_max = 0;
  std::optional<double> operator_min;
  std::optional<double> operator_max;
};

// QARTOD test 5 (climatology; PP test 5, checked: no fail flag "because of the
// dynamic nature of PP"; TS test 5 from memory): outside the range for the
// sample's UTC month -> suspect (3). A month without a range is not evaluated (2).
struct ClimatologyRange {
  int month = 1;  // 1..12
  double min = 0;
  double max = 0;
};
struct ClimatologyParams {
  static constexpr std::string_view kind = "climatology";
  std::vector<ClimatologyRange> ranges;
};

// QARTOD test 6 (spike; PP test 6, checked; TS test 6 from memory): the
// manual tests point n-1 against SPK_REF, the mean of its neighbours n-2 and
// n; here the held sample x[n] against (x[n-1] + x[n+1]) / 2, the same test
// one poll later. |x - SPK_REF| above suspect_threshold (THRSHLD_LOW) ->
// suspect, above fail_threshold (THRSHLD_HIGH) -> fail. Channel units.
struct SpikeParams {
  static constexpr std::string_view kind = "spike";
  double suspect_threshold = 0;
  double fail_threshold = 0;
};

// QARTOD test 7 (rate of change; PP test 7, checked: "|PPn - PPn-1| >
// N_DEV*SD", SD of the series over the previous TIM_DEV, example N_DEV = 3,
// TIM_DEV = 25 hours, no fail flag; TS test 7 from memory): |x[n] - x[n-1]|
// above n_dev standard deviations of the values in the trailing period_s ->
// suspect. Needs min_count samples in the period. Not done: the PP manual's
// exception for zero values.
struct RateOfChangeParams {
  static constexpr std::string_view kind = "rate_of_change";
  double n_dev = 3.0;
  std::int64_t period_s = 25 * 3600;
  std::uint32_t min_count = 10;
};

// QARTOD test 8 (flat line; PP section 3.3 test 8, checked; TS test 8 from
// memory). The manual: "This test compares the present observation (PPn) to a
// number (REP_CNT_FAIL or REP_CNT_SUSPECT) of previous observations", codable
// instruction "For i=1,REP_CNT_FAIL |PPn - PPn-i| < EPS". So the counts are
// of PREVIOUS observations, the present one not included: the last
// fail_count values before x[n] all within tolerance of x[n] -> fail, the
// last suspect_count -> suspect. (The manual's prose, "when the five most
// recent observations are equal", with REP_CNT_FAIL = 5, reads as if the
// present one were included; the codable instruction is followed here.)
// Examples in the manual: REP_CNT_FAIL = 5, REP_CNT_SUSPECT = 3. Not done:
// the manual's "PPn != 0" exception for the fail flag.
struct FlatLineParams {
  static constexpr std::string_view kind = "flat_line";
  std::uint32_t suspect_count = 3;
  std::uint32_t fail_count = 5;
  double tolerance = 0;
};

// QARTOD test 10 (attenuated signal; PP test 10, checked: SD or MAX-MIN over
// TST_TIM below MIN_VAR_WARN -> suspect, below MIN_VAR_FAIL -> fail, example
// TST_TIM = 12 hours; TS test 10 from memory): variation over the trailing
// period_s (the current sample included) below suspect_below -> suspect, below
// fail_below -> fail. Variation is max - min ("range") or the standard
// deviation ("sd"). Needs min_count samples in the period.
enum class VariationMeasure : std::uint8_t { range, sd };
struct AttenuatedSignalParams {
  static constexpr std::string_view kind = "attenuated_signal";
  std::int64_t period_s = 12 * 3600;
  VariationMeasure measure = VariationMeasure::range;
  std::optional<double> suspect_below;
  std::optional<double> fail_below;
  std::uint32_t min_count = 10;
};

// QARTOD test 1 (gap; PP section 3.3 test 1, checked: "Test determines that
// the most recent data point has been received within the expected time
// window (TIM_INC) and has the correct time stamp", Fail=4; TS test 1 from
// memory): each poll has a due time (the previous sample's time plus
// QcConfig::poll_interval_s). A due time that passes by more than late_s
// without a sample becomes a synthesised sample with no value, flagged 9
// (missing; reason timing_gap: flag 9 always means "no value"); a sample
// with a value more than late_s away from its due time is flagged fail (4,
// reason late) and keeps its value. A gap of more than max_fill due times is a break instead: no
// samples are synthesised, the look-back restarts and the windows around it
// are cut short (partial).
struct TimingParams {
  static constexpr std::string_view kind = "timing";
  std::int64_t late_s = 10;  // common practice, no source
  std::uint32_t max_fill = 60;
};

// Instrument status: driver-reported reason bits (reasons.h) -> fail / suspect.
struct InstrumentStatusParams {
  static constexpr std::string_view kind = "instrument_status";
  std::uint32_t fail_on = reason::instrument_status | reason::garbled | reason::offline;
  std::uint32_t suspect_on = 0;  // warming_up makes a sample 2 by itself (channel_qc.cpp)
};

// Solar quenching (not a QARTOD test): daytime fluorescence is depressed by
// non-photochemical quenching under strong light, so a sample taken while the
// sun stands above suspect_above_deg (geometric elevation at
// QcConfig::location) is suspect. Default: common practice, no source.
struct SolarQuenchingParams {
  static constexpr std::string_view kind = "solar_quenching";
  double suspect_above_deg = 20.0;
};

// Fouling drift (not a QARTOD test): each night (sun below night_below_deg)
// gives a baseline, the lowest value of the night's usable samples. The first
// night after the last maintenance is the reference. Growth or fouling: a
// biofilm adds a small, steady offset night after night; algae grow by a
// fraction of what is there. So at each night's close, with `rise` = this
// baseline minus the previous night's:
//  - rise > growth_fraction * max(previous baseline, max_rise), or rise >
//    max_rise_per_night when that is set: growth (a bloom). The reference
//    moves up by the same rise, so growth never adds to the drift.
//  - a baseline below the reference lowers the reference to it (the optics
//    are at least that clean).
//  - otherwise the rise is slow and counts: drift = baseline - reference;
//    above max_rise (channel units) samples are suspect until the next
//    maintenance ends or a night's drift falls back within max_rise.
// -6 deg is the end of civil twilight. Defaults of growth_fraction and
// max_rise_per_night: common practice, no source. 50 % a night is a fast
// bloom's pace (a doubling in under two days); a biofilm adds a few per cent
// of the signal a night. A bloom slower than growth_fraction is taken for
// drift: its samples become suspect (fouling_drift), which alert rules
// accept by default (alert_rules.h), so the alert still sees it.
struct FoulingDriftParams {
  static constexpr std::string_view kind = "fouling_drift";
  double max_rise = 0;
  double night_below_deg = -6.0;
  std::uint32_t min_night_samples = 10;
  double growth_fraction = 0.5;              // common practice, no source
  std::optional<double> max_rise_per_night;  // channel units; none by default
};

using QcTestParams =
    std::variant<GrossRangeParams, ClimatologyParams, SpikeParams, RateOfChangeParams,
                 FlatLineParams, AttenuatedSignalParams, TimingParams, InstrumentStatusParams,
                 SolarQuenchingParams, FoulingDriftParams>;

struct QcConfig {
  std::int64_t poll_interval_s = 60;
  std::optional<GeoPoint> location;  // required by solar_quenching and fouling_drift
  std::vector<QcTestParams> tests;   // evaluated in this order
  // Values on each side of a cleaning whose medians make a CleaningStep
  // (channel_qc.h). Common practice, no source.
  std::uint32_t cleaning_samples = 5;
};

// The kind name of a test ("gross_range", ...).
std::string_view test_kind(const QcTestParams& test);

// One problem in a parameter set: `where` is a JSON-pointer-like path relative
// to the QcConfig ("/tests/2/fail_threshold"), `message` says what is allowed.
struct ParamProblem {
  std::string where;
  std::string message;
};

// All problems in a QcConfig; empty when it is usable. ChannelQc REQUIRES a
// config without problems.
std::vector<ParamProblem> check_qc_config(const QcConfig& config);

}  // namespace tarn::pipeline
