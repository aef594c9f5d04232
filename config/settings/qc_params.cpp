#include "config/settings/qc_params.h"

#include <cmath>

namespace tarn::pipeline {
namespace {

struct Checker {
  std::vector<ParamProblem>& out;
  std::string base;

  void problem(std::string_view field, std::string message) {
    out.push_back({base + "/" + std::string(field), std::move(message)});
  }
  void finite(std::string_view field, double v) {
    if (!std::isfinite(v)) problem(field, "must be a finite number");
  }

  void operator()(const GrossRangeParams& p) {
    finite("sensor_min", p.sensor_min);
    finite("sensor_max", p.sensor_max);
    if (!(p.sensor_min < p.sensor_max)) problem("sensor_max", "must be greater than sensor_min");
    if (p.operator_min && p.operator_max && !(*p.operator_min < *p.operator_max))
      problem("operator_max", "must be greater than operator_min");
    if (p.operator_min && (*p.operator_min < p.sensor_min || *p.operator_min > p.sensor_max))
      problem("operator_min", "must lie within sensor_min..sensor_max");
    if (p.operator_max && (*p.operator_max < p.sensor_min || *p.operator_max > p.sensor_max))
      problem("operator_max", "must lie within sensor_min..sensor_max");
  }
  void operator()(const ClimatologyParams& p) {
    std::uint32_t seen = 0;
    for (std::size_t i = 0; i < p.ranges.size(); ++i) {
      const auto& r = p.ranges[i];
      const std::string at = "ranges/" + std::to_string(i);
      if (r.month < 1 || r.month > 12) {
        problem(at + "/month", "must be 1..12");
        continue;
      }
      if (seen & (1u << r.month)) problem(at + "/month", "month given twice; allowed once");
      seen |= 1u << r.month;
      if (!(r.min < r.max)) problem(at + "/max", "must be greater than min");
    }
    if (p.ranges.empty()) problem("ranges", "must list at least one month");
  }
  void operator()(const SpikeParams& p) {
    if (!(p.suspect_threshold > 0)) problem("suspect_threshold", "must be > 0");
    if (!(p.fail_threshold >= p.suspect_threshold))
      problem("fail_threshold", "must be >= suspect_threshold");
  }
  void operator()(const RateOfChangeParams& p) {
    if (!(p.n_dev > 0)) problem("n_dev", "must be > 0");
    if (p.period_s <= 0) problem("period_s", "must be > 0");
    if (p.min_count < 2) problem("min_count", "must be >= 2");
  }
  void operator()(const FlatLineParams& p) {
    if (p.suspect_count < 2) problem("suspect_count", "must be >= 2");
    if (p.fail_count < p.suspect_count) problem("fail_count", "must be >= suspect_count");
    if (p.fail_count > 10000) problem("fail_count", "must be <= 10000");
    if (!(p.tolerance > 0)) problem("tolerance", "must be > 0");
  }
  void operator()(const AttenuatedSignalParams& p) {
    if (p.period_s <= 0) problem("period_s", "must be > 0");
    if (!p.suspect_below && !p.fail_below)
      problem("suspect_below", "give suspect_below, fail_below or both");
    if (p.suspect_below && p.fail_below && !(*p.fail_below <= *p.suspect_below))
      problem("fail_below", "must be <= suspect_below");
    if (p.min_count < 2) problem("min_count", "must be >= 2");
  }
  void operator()(const TimingParams& p) {
    if (p.late_s < 0) problem("late_s", "must be >= 0");
    if (p.max_fill < 1) problem("max_fill", "must be >= 1");
  }
  void operator()(const InstrumentStatusParams& p) {
    if (p.fail_on & p.suspect_on)
      problem("suspect_on", "a bit may not be in both fail_on and suspect_on");
  }
  void operator()(const SolarQuenchingParams& p) {
    if (!(p.suspect_above_deg >= -90 && p.suspect_above_deg <= 90))
      problem("suspect_above_deg", "must be -90..90");
  }
  void operator()(const FoulingDriftParams& p) {
    if (!(p.max_rise > 0)) problem("max_rise", "must be > 0");
    if (!(p.night_below_deg >= -90 && p.night_below_deg <= 90))
      problem("night_below_deg", "must be -90..90");
    if (p.min_night_samples < 1) problem("min_night_samples", "must be >= 1");
    if (!(p.growth_fraction > 0 && p.growth_fraction <= 10))
      problem("growth_fraction", "must be > 0 and <= 10");
    if (p.max_rise_per_night && !(*p.max_rise_per_night > 0))
      problem("max_rise_per_night", "must be > 0");
  }
};

}  // namespace

std::string_view test_kind(const QcTestParams& test) {
  return std::visit([](const auto& p) { return std::decay_t<decltype(p)>::kind; }, test);
}

std::vector<ParamProblem> check_qc_config(const QcConfig& config) {
  std::vector<ParamProblem> out;
  if (config.poll_interval_s <= 0) out.push_back({"/poll_interval_s", "must be > 0"});
  if (config.cleaning_samples < 1 || config.cleaning_samples > 1000)
    out.push_back({"/cleaning_samples", "must be 1..1000"});
  if (config.location) {
    if (!(std::fabs(config.location->latitude_deg) <= 90))
      out.push_back({"/location/latitude_deg", "must be -90..90"});
    if (!(std::fabs(config.location->longitude_deg) <= 180))
      out.push_back({"/location/longitude_deg", "must be -180..180"});
  }
  int spikes = 0, timings = 0;
  for (std::size_t i = 0; i < config.tests.size(); ++i) {
    const auto& t = config.tests[i];
    const std::string base = "/tests/" + std::to_string(i);
    Checker c{out, base};
    std::visit(c, t);
    if (std::holds_alternative<SpikeParams>(t) && ++spikes > 1)
      out.push_back({base, "spike may be listed once per channel"});
    if (std::holds_alternative<TimingParams>(t) && ++timings > 1)
      out.push_back({base, "timing may be listed once per channel"});
    if (std::holds_alternative<TimingParams>(t) &&
        std::get<TimingParams>(t).late_s * 2 > config.poll_interval_s)
      out.push_back({base + "/late_s", "must be <= poll_interval_s / 2"});
    if ((std::holds_alternative<SolarQuenchingParams>(t) ||
         std::holds_alternative<FoulingDriftParams>(t)) &&
        !config.location)
      out.push_back({"/location", std::string(test_kind(t)) + " needs the station location"});
  }
  return out;
}

}  // namespace tarn::pipeline
