// Parameters of the per-channel QC tests: plain structs with plain field names,
// so that config/ can fill them from JSON one field at a time. A channel's QC
// is an ordered list of tests (QcConfig::tests); see channel_qc.h for how the
// order matters. Test numbers refer to the U.S. IOOS QARTOD "Manual for
// Real-Time Quality Control of In-situ Temperature and Salinity Data"
// (version 2.1, 2020), whose numbering the dissolved-oxygen manual shares
// (from memory). Default values are marked as from memory or as common
// practice; a station sets its own.
#pragma once

#include <cstdint>
#include <optional>
#include <string>
#include <string_view>
#include <variant>
#include <vector>

#include "daemon/pipeline/reasons.h"

namespace tarn::pipeline {

struct GeoPoint {
  double latitude_deg = 0;   // north positive
  double longitude_deg = 0;  // east positive
};

// QARTOD test 4 (gross range): outside the sensor's limits -> fail (4),
// outside the operator's limits -> suspect (3).
struct GrossRangeParams {
  static constexpr std::string_view kind = "gross_range";
  double sensor_min = 0;
  double sensor_max = 0;
  std::optional<double> operator_min;
  std::optional<double> operator_max;
};

// QARTOD test 5 (climatology): outside the range for the sample's UTC month ->
// suspect (3). A month without a range is not evaluated (2).
struct ClimatologyRange {
  int month = 1;  // 1..12
  double min = 0;
  double max = 0;
};
struct ClimatologyParams {
  static constexpr std::string_view kind = "climatology";
  std::vector<ClimatologyRange> ranges;
};

// QARTOD test 6 (spike): |x[n] - (x[n-1] + x[n+1]) / 2| above suspect_threshold
// -> suspect, above fail_threshold -> fail. Thresholds in channel units.
struct SpikeParams {
  static constexpr std::string_view kind = "spike";
  double suspect_threshold = 0;
  double fail_threshold = 0;
};

// QARTOD test 7 (rate of change): |x[n] - x[n-1]| above n_dev standard
// deviations of the trailing period_s -> suspect. The manual's example period
// is 25 hours and n_dev 3 (from memory). Needs min_count samples in the period.
struct RateOfChangeParams {
  static constexpr std::string_view kind = "rate_of_change";
  double n_dev = 3.0;
  std::int64_t period_s = 25 * 3600;
  std::uint32_t min_count = 10;
};

// QARTOD test 8 (flat line): the current value and the values just before it
// all within tolerance of it (|x[n] - x[n-k]| < tolerance): that many samples
// in a row (the current one included) reaching suspect_count -> suspect,
// reaching fail_count -> fail.
struct FlatLineParams {
  static constexpr std::string_view kind = "flat_line";
  std::uint32_t suspect_count = 3;
  std::uint32_t fail_count = 5;
  double tolerance = 0;
};

// QARTOD test 10 (attenuated signal): variation over the trailing period_s
// (the current sample included) below suspect_below -> suspect, below
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

// QARTOD test 1 (timing/gap): each poll has a due time (the previous sample's
// time plus QcConfig::poll_interval_s). A due time that passes by more than
// late_s without a sample becomes a synthesised sample flagged missing (9,
// reason timing_gap); a sample more than late_s away from its due time is
// flagged missing (9, reason timing_off_schedule) and keeps its value for the
// archive. A gap of more than max_fill due times is a break instead: no
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
// night after the last maintenance is the reference; once a later night's
// baseline exceeds it by more than max_rise (channel units), samples are
// suspect until the next maintenance ends (or a night falls back within
// max_rise). -6 deg is the end of civil twilight.
struct FoulingDriftParams {
  static constexpr std::string_view kind = "fouling_drift";
  double max_rise = 0;
  double night_below_deg = -6.0;
  std::uint32_t min_night_samples = 10;
};

using QcTestParams =
    std::variant<GrossRangeParams, ClimatologyParams, SpikeParams, RateOfChangeParams,
                 FlatLineParams, AttenuatedSignalParams, TimingParams, InstrumentStatusParams,
                 SolarQuenchingParams, FoulingDriftParams>;

struct QcConfig {
  std::int64_t poll_interval_s = 60;
  std::optional<GeoPoint> location;  // required by solar_quenching and fouling_drift
  std::vector<QcTestParams> tests;   // evaluated in this order
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
