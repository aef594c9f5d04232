#include "daemon/pipeline/qc_tests.h"

#include <algorithm>
#include <chrono>
#include <cmath>

namespace tarn::pipeline {

using codec::Flag;
namespace {

constexpr TestVerdict pass{Flag::pass, 0};
constexpr TestVerdict not_evaluated{Flag::not_evaluated, 0};

// Sample standard deviation from shifted sums; 0 when rounding makes it negative.
double sd_from_sums(double sum, double sumsq, std::size_t n) {
  if (n < 2) return 0;
  const double var = (sumsq - sum * sum / static_cast<double>(n)) / static_cast<double>(n - 1);
  return var > 0 ? std::sqrt(var) : 0.0;
}

constexpr std::uint32_t kRecomputeEvery = 4096;  // bounds rounding drift of running sums

}  // namespace

TestVerdict gross_range_test(const GrossRangeParams& p, double v) {
  if (!(v >= p.sensor_min && v <= p.sensor_max)) return {Flag::fail, reason::gross_range_sensor};
  if ((p.operator_min && v < *p.operator_min) || (p.operator_max && v > *p.operator_max))
    return {Flag::suspect, reason::gross_range_operator};
  return pass;
}

TestVerdict climatology_test(const ClimatologyParams& p, double v, int month) {
  for (const auto& r : p.ranges) {
    if (r.month != month) continue;
    if (v < r.min || v > r.max) return {Flag::suspect, reason::climatology};
    return pass;
  }
  return not_evaluated;
}

TestVerdict spike_test(const SpikeParams& p, double prev, double v, double next) {
  const double dev = std::fabs(v - (prev + next) / 2.0);
  if (dev > p.fail_threshold) return {Flag::fail, reason::spike};
  if (dev > p.suspect_threshold) return {Flag::suspect, reason::spike};
  return pass;
}

TestVerdict instrument_status_test(const InstrumentStatusParams& p, std::uint32_t source_reasons) {
  if (source_reasons & p.fail_on) return {Flag::fail, source_reasons & p.fail_on};
  if (source_reasons & p.suspect_on) return {Flag::suspect, source_reasons & p.suspect_on};
  return pass;
}

TestVerdict solar_quenching_test(const SolarQuenchingParams& p, double sun_elevation_deg) {
  if (sun_elevation_deg > p.suspect_above_deg) return {Flag::suspect, reason::solar_quenching};
  return pass;
}

int utc_month(std::int64_t t) {
  using namespace std::chrono;
  const sys_days day = floor<days>(sys_seconds{seconds{t}});
  return static_cast<int>(static_cast<unsigned>(year_month_day{day}.month()));
}

std::size_t lookback_capacity(std::int64_t period_s, std::int64_t poll_interval_s) {
  const std::int64_t iv = poll_interval_s > 0 ? poll_interval_s : 1;
  const std::int64_t n = period_s / iv + 2;
  return static_cast<std::size_t>(std::clamp<std::int64_t>(n, 2, 1 << 20));
}

// --- rate of change -------------------------------------------------------

RateOfChangeCheck::RateOfChangeCheck(const RateOfChangeParams& p, std::int64_t poll_interval_s)
    : p_(p), buf_(lookback_capacity(p.period_s, poll_interval_s)) {}

void RateOfChangeCheck::reset() {
  buf_.clear();
  sum_ = sumsq_ = 0;
  since_recompute_ = 0;
}

void RateOfChangeCheck::recompute() {
  shift_ = buf_.empty() ? 0 : buf_.front().v;
  sum_ = sumsq_ = 0;
  for (std::size_t i = 0; i < buf_.size(); ++i) {
    const double d = buf_[i].v - shift_;
    sum_ += d;
    sumsq_ += d * d;
  }
  since_recompute_ = 0;
}

void RateOfChangeCheck::evict_before(std::int64_t t_min) {
  while (!buf_.empty() && buf_.front().t < t_min) {
    const double d = buf_.front().v - shift_;
    sum_ -= d;
    sumsq_ -= d * d;
    buf_.pop_front();
  }
}

TestVerdict RateOfChangeCheck::step(std::int64_t t, double v, bool learn) {
  // The trailing period is (t - period_s, t): the samples before this one.
  evict_before(t - p_.period_s + 1);
  TestVerdict out = not_evaluated;
  if (buf_.size() >= p_.min_count) {
    const double sd = sd_from_sums(sum_, sumsq_, buf_.size());
    const double change = std::fabs(v - buf_.back().v);
    out = change > p_.n_dev * sd ? TestVerdict{Flag::suspect, reason::rate_of_change} : pass;
  }
  if (learn) {
    if (buf_.empty()) shift_ = v, sum_ = sumsq_ = 0;
    if (buf_.full()) evict_before(buf_.front().t + 1);
    const double d = v - shift_;
    sum_ += d;
    sumsq_ += d * d;
    buf_.push_back({t, v});
    if (++since_recompute_ >= kRecomputeEvery) recompute();
  }
  return out;
}

// --- flat line --------------------------------------------------------------

FlatLineCheck::FlatLineCheck(const FlatLineParams& p)
    : p_(p), buf_(std::max<std::uint32_t>(p.fail_count, p.suspect_count)) {}

// QARTOD phytoplankton manual (2017), section 3.3, test 8, codable
// instructions: "For i=1,REP_CNT_FAIL |PPn - PPn-i| < EPS" -> fail; the same
// with REP_CNT_SUSPECT -> suspect. The count is of PREVIOUS observations; the
// present one is not included.
TestVerdict FlatLineCheck::step(double v, bool learn) {
  std::uint32_t previous_within = 0;  // previous values within tolerance, newest first, unbroken
  for (std::size_t i = buf_.size(); i-- > 0;) {
    if (!(std::fabs(v - buf_[i]) < p_.tolerance)) break;
    ++previous_within;
  }
  TestVerdict out = pass;
  if (previous_within >= p_.fail_count) {
    out = {Flag::fail, reason::flat_line};
  } else if (previous_within >= p_.suspect_count) {
    out = {Flag::suspect, reason::flat_line};
  }
  if (learn) buf_.push_back(v);
  return out;
}

// --- attenuated signal -------------------------------------------------------

AttenuatedSignalCheck::AttenuatedSignalCheck(const AttenuatedSignalParams& p,
                                             std::int64_t poll_interval_s)
    : p_(p),
      buf_(lookback_capacity(p.period_s, poll_interval_s)),
      maxq_(buf_.capacity()),
      minq_(buf_.capacity()) {}

void AttenuatedSignalCheck::reset() {
  buf_.clear();
  maxq_.clear();
  minq_.clear();
  sum_ = sumsq_ = 0;
  since_recompute_ = 0;
}

void AttenuatedSignalCheck::recompute() {
  shift_ = buf_.empty() ? 0 : buf_.front().v;
  sum_ = sumsq_ = 0;
  for (std::size_t i = 0; i < buf_.size(); ++i) {
    const double d = buf_[i].v - shift_;
    sum_ += d;
    sumsq_ += d * d;
  }
  since_recompute_ = 0;
}

// Drops every sample with time <= t_max.
void AttenuatedSignalCheck::evict_through(std::int64_t t_max) {
  while (!buf_.empty() && buf_.front().t <= t_max) {
    const double d = buf_.front().v - shift_;
    sum_ -= d;
    sumsq_ -= d * d;
    buf_.pop_front();
  }
  while (!maxq_.empty() && maxq_.front().t <= t_max) maxq_.pop_front();
  while (!minq_.empty() && minq_.front().t <= t_max) minq_.pop_front();
}

void AttenuatedSignalCheck::add(std::int64_t t, double v) {
  if (buf_.empty()) shift_ = v, sum_ = sumsq_ = 0;
  if (buf_.full()) evict_through(buf_.front().t);
  const double d = v - shift_;
  sum_ += d;
  sumsq_ += d * d;
  buf_.push_back({t, v});
  while (!maxq_.empty() && maxq_.back().v <= v) maxq_.pop_back();
  maxq_.push_back({t, v});
  while (!minq_.empty() && minq_.back().v >= v) minq_.pop_back();
  minq_.push_back({t, v});
  if (++since_recompute_ >= kRecomputeEvery) recompute();
}

TestVerdict AttenuatedSignalCheck::step(std::int64_t t, double v, bool learn) {
  if (!learn) return not_evaluated;
  // The period is (t - period_s, t], this sample included.
  evict_through(t - p_.period_s);
  add(t, v);
  if (buf_.size() < p_.min_count) return not_evaluated;
  const double variation = p_.measure == VariationMeasure::range
                               ? maxq_.front().v - minq_.front().v
                               : sd_from_sums(sum_, sumsq_, buf_.size());
  if (p_.fail_below && variation < *p_.fail_below) return {Flag::fail, reason::attenuated};
  if (p_.suspect_below && variation < *p_.suspect_below) return {Flag::suspect, reason::attenuated};
  return pass;
}

// --- fouling drift ------------------------------------------------------------

void FoulingDriftCheck::close_night() {
  if (s_.night_count >= p_.min_night_samples) {
    const double baseline = s_.night_min;
    if (!s_.reference) {
      s_.reference = baseline;
    } else {
      const double prev = s_.last_baseline ? *s_.last_baseline : *s_.reference;
      const double rise = baseline - prev;
      const bool growth = rise > p_.growth_fraction * std::max(prev, p_.max_rise) ||
                          (p_.max_rise_per_night && rise > *p_.max_rise_per_night);
      if (growth) *s_.reference += rise;  // the reference follows a bloom
      if (baseline < *s_.reference) *s_.reference = baseline;
      s_.drifted = baseline - *s_.reference > p_.max_rise;
    }
    s_.last_baseline = baseline;
  }
  s_.in_night = false;
  s_.night_count = 0;
}

void FoulingDriftCheck::restart_reference() {
  s_.reference.reset();
  s_.last_baseline.reset();
  s_.drifted = false;
  s_.in_night = false;
  s_.night_count = 0;
}

TestVerdict FoulingDriftCheck::step(double sun_elevation_deg, double v, bool learn) {
  const bool night = sun_elevation_deg < p_.night_below_deg;
  if (!night && s_.in_night) close_night();
  if (night && learn) {
    if (!s_.in_night || s_.night_count == 0) {
      s_.night_min = v;
    } else {
      s_.night_min = std::min(s_.night_min, v);
    }
    s_.in_night = true;
    ++s_.night_count;
  }
  if (!s_.reference) return not_evaluated;
  return s_.drifted ? TestVerdict{Flag::suspect, reason::fouling_drift} : pass;
}

}  // namespace tarn::pipeline
