#include "daemon/pipeline/channel_qc.h"

#include <algorithm>
#include <cmath>
#include <cstdlib>
#include <limits>
#include <stdexcept>
#include <string>

namespace tarn::pipeline {

using codec::Flag;
namespace {

template <class... Ts>
struct Overloaded : Ts... {
  using Ts::operator()...;
};
template <class... Ts>
Overloaded(Ts...) -> Overloaded<Ts...>;

std::optional<double> median_of(std::vector<double> v) {
  if (v.empty()) return std::nullopt;
  std::sort(v.begin(), v.end());
  const std::size_t n = v.size();
  return n % 2 ? v[n / 2] : (v[n / 2 - 1] + v[n / 2]) / 2.0;
}

}  // namespace

ChannelQc::ChannelQc(QcConfig config) : config_(std::move(config)) {
  const auto problems = check_qc_config(config_);
  if (!problems.empty())
    throw std::invalid_argument("ChannelQc: " + problems.front().where + ": " +
                                problems.front().message);
  bool needs_sun = false;
  checks_.reserve(config_.tests.size());
  for (const auto& t : config_.tests) {
    const std::int64_t iv = config_.poll_interval_s;
    std::visit(
        Overloaded{
            [&](const RateOfChangeParams& p) { checks_.emplace_back(RateOfChangeCheck(p, iv)); },
            [&](const FlatLineParams& p) { checks_.emplace_back(FlatLineCheck(p)); },
            [&](const AttenuatedSignalParams& p) {
              checks_.emplace_back(AttenuatedSignalCheck(p, iv));
            },
            [&](const FoulingDriftParams& p) {
              checks_.emplace_back(FoulingDriftCheck(p));
              needs_sun = true;
            },
            [&](const SolarQuenchingParams&) {
              checks_.emplace_back(std::monostate{});
              needs_sun = true;
            },
            [&](const TimingParams& p) {
              checks_.emplace_back(std::monostate{});
              timing_ = p;
            },
            [&](const SpikeParams& p) {
              checks_.emplace_back(std::monostate{});
              spike_ = p;
            },
            [&](const auto&) { checks_.emplace_back(std::monostate{}); },
        },
        t);
  }
  if (needs_sun) sun_.emplace(config_.location->latitude_deg, config_.location->longitude_deg);
}

std::int64_t ChannelQc::late_s() const {
  return timing_ ? timing_->late_s : config_.poll_interval_s / 2;
}

std::int64_t ChannelQc::delivered_before() const {
  if (pending_) return pending_->s.t;
  return last_t_ ? *last_t_ + 1 : std::numeric_limits<std::int64_t>::min();
}

bool ChannelQc::maintenance_at(std::int64_t t) const {
  if (maintenance_since_ && t >= *maintenance_since_) return true;
  return last_maintenance_ && t >= last_maintenance_->start && t < last_maintenance_->end;
}

int ChannelQc::month_of(std::int64_t t) {
  const std::int64_t day = t >= 0 ? t / 86400 : (t - 86399) / 86400;
  if (day != month_day_) {
    month_day_ = day;
    month_ = utc_month(t);
  }
  return month_;
}

void ChannelQc::reset_lookback() {
  for (auto& c : checks_) {
    std::visit(Overloaded{[](std::monostate&) {}, [](FoulingDriftCheck&) {},
                          [](auto& check) { check.reset(); }},
               c);
  }
  left_.reset();
}

// The worst verdict of the tests that ran, 2 where none could. A sample taken
// while its instrument warms up (after power-up or a reconnect) is never
// better than 2: the instrument has not yet settled, so a pass means nothing.
Flag ChannelQc::settled_flag(const Pending& p) {
  Flag f = p.ran ? p.worst : Flag::not_evaluated;
  if (p.s.reasons & reason::warming_up) f = worse(f, Flag::not_evaluated);
  return f;
}

void ChannelQc::settle(std::optional<double> right, QcSink& out) {
  if (!pending_) return;
  Pending& p = *pending_;
  if (p.spike_usable && left_ && right) {
    const TestVerdict r = spike_test(*spike_, *left_, p.v, *right);
    p.ran = true;
    p.worst = worse(p.worst, r.flag);
    p.s.reasons |= r.reasons;
  }
  p.s.flag = settled_flag(p);
  deliver(p.s, out);
  left_ = p.spike_usable ? std::optional<double>(p.v) : std::nullopt;
  pending_.reset();
}

void ChannelQc::emit_direct(const FlaggedSample& s, QcSink& out) {
  settle(std::nullopt, out);
  deliver(s, out);
  left_.reset();
}

void ChannelQc::deliver(const FlaggedSample& s, QcSink& out) {
  out.on_sample(s);
  const bool usable = s.value && s.flag != Flag::fail && s.flag != Flag::missing;
  if (!usable) return;
  if (cleaning_ && s.t >= cleaning_->step.maintenance_end) {
    cleaning_->after.push_back(*s.value);
    if (cleaning_->after.size() >= config_.cleaning_samples) {
      close_cleaning();
      flush_cleanings(out);
    }
  }
  recent_.push_back(*s.value);
  while (recent_.size() > config_.cleaning_samples) recent_.pop_front();
}

void ChannelQc::close_cleaning() {
  if (!cleaning_) return;
  CleaningStep c = cleaning_->step;
  c.n_before = static_cast<std::uint32_t>(cleaning_->before.size());
  c.before = median_of(cleaning_->before);
  c.n_after = static_cast<std::uint32_t>(cleaning_->after.size());
  c.after = median_of(cleaning_->after);
  ready_.push_back(c);
  cleaning_.reset();
}

void ChannelQc::flush_cleanings(QcSink& out) {
  for (const auto& c : ready_) out.on_cleaning(c);
  ready_.clear();
}

void ChannelQc::emit_missing(std::int64_t t, std::uint32_t reasons, QcSink& out) {
  FlaggedSample s;
  s.t = t;
  s.flag = Flag::missing;
  s.reasons = reasons;
  emit_direct(s, out);
  ++counters_.synthesised_missing;
}

// Timing test (QARTOD test 1): places the sample on its due poll, synthesises
// the polls it skipped, detects breaks. Returns true if the sample is off
// schedule.
bool ChannelQc::schedule(const RawSample& raw, QcSink& out) {
  if (!timing_ || !anchor_) {
    anchor_ = raw.t;
    return false;
  }
  const std::int64_t iv = config_.poll_interval_s;
  const std::int64_t j = (raw.t - *anchor_ + iv / 2) / iv;  // nearest due poll
  if (j == 0) return true;  // a second sample for a due poll already taken
  if (j - 1 > static_cast<std::int64_t>(timing_->max_fill)) {
    settle(std::nullopt, out);
    out.on_break(*last_t_, raw.t);
    ++counters_.breaks;
    reset_lookback();
    anchor_ = raw.t;
    return false;
  }
  for (std::int64_t k = 1; k < j; ++k) emit_missing(*anchor_ + k * iv, reason::timing_gap, out);
  const std::int64_t due = *anchor_ + j * iv;
  const bool off = std::llabs(raw.t - due) > timing_->late_s;
  anchor_ = off ? due : raw.t;
  return off;
}

void ChannelQc::push(const RawSample& raw, QcSink& out) {
  flush_cleanings(out);
  if ((last_t_ && raw.t <= *last_t_) || (floor_t_ && raw.t <= *floor_t_)) {
    ++counters_.dropped_out_of_order;
    return;
  }
  const bool off_schedule = schedule(raw, out);
  last_t_ = raw.t;
  ++counters_.accepted;

  FlaggedSample fs{raw.t, raw.value, Flag::missing, raw.source_reasons};
  if (fs.value && !std::isfinite(*fs.value)) {  // NaN or infinity: garbage, not a value
    fs.value.reset();
    fs.reasons |= reason::garbled;
  }
  if (!fs.value) return emit_direct(fs, out);
  if (off_schedule) {  // QARTOD test 1: wrong time stamp -> fail (4), the value is kept
    fs.flag = Flag::fail;
    fs.reasons |= reason::late;
    return emit_direct(fs, out);
  }
  if (maintenance_at(raw.t)) {
    fs.flag = Flag::fail;
    fs.reasons |= reason::maintenance;
    return emit_direct(fs, out);
  }
  evaluate(raw, out);
}

void ChannelQc::evaluate(const RawSample& raw, QcSink& out) {
  const double v = *raw.value;
  Pending p;
  p.s = FlaggedSample{raw.t, raw.value, Flag::not_evaluated, raw.source_reasons};
  p.v = v;
  std::optional<double> sun_elev;
  auto sun = [&] {
    if (!sun_elev) sun_elev = sun_->elevation_deg(raw.t);
    return *sun_elev;
  };
  for (std::size_t i = 0; i < config_.tests.size(); ++i) {
    const bool learn = !(p.ran && p.worst == Flag::fail);
    TestVerdict r;
    std::visit(
        Overloaded{
            [&](const GrossRangeParams& q) { r = gross_range_test(q, v); },
            [&](const ClimatologyParams& q) { r = climatology_test(q, v, month_of(raw.t)); },
            [&](const SpikeParams&) { p.spike_usable = learn; },
            [&](const RateOfChangeParams&) {
              r = std::get<RateOfChangeCheck>(checks_[i]).step(raw.t, v, learn);
            },
            [&](const FlatLineParams&) { r = std::get<FlatLineCheck>(checks_[i]).step(v, learn); },
            [&](const AttenuatedSignalParams&) {
              r = std::get<AttenuatedSignalCheck>(checks_[i]).step(raw.t, v, learn);
            },
            [&](const TimingParams&) {
              r = {Flag::pass, 0};
            },
            [&](const InstrumentStatusParams& q) {
              r = instrument_status_test(q, raw.source_reasons);
            },
            [&](const SolarQuenchingParams& q) { r = solar_quenching_test(q, sun()); },
            [&](const FoulingDriftParams&) {
              r = std::get<FoulingDriftCheck>(checks_[i]).step(sun(), v, learn);
            },
        },
        config_.tests[i]);
    if (r.flag == Flag::not_evaluated) continue;
    p.worst = p.ran ? worse(p.worst, r.flag) : r.flag;
    p.ran = true;
    p.s.reasons |= r.reasons;
  }
  if (!spike_) {
    p.s.flag = settled_flag(p);
    deliver(p.s, out);
    return;
  }
  settle(p.spike_usable ? std::optional<double>(v) : std::nullopt, out);
  pending_ = p;
}

void ChannelQc::advance(std::int64_t now, QcSink& out) {
  flush_cleanings(out);
  if (timing_ && anchor_) {
    const std::int64_t iv = config_.poll_interval_s;
    for (std::uint32_t n = 0; n < timing_->max_fill && *anchor_ + iv + timing_->late_s < now; ++n) {
      const std::int64_t slot = *anchor_ + iv;
      emit_missing(slot, reason::timing_gap, out);
      anchor_ = slot;
      last_t_ = slot;
    }
  }
  if (pending_ && now > pending_->s.t + config_.poll_interval_s + late_s())
    settle(std::nullopt, out);
}

void ChannelQc::finish(QcSink& out) {
  settle(std::nullopt, out);
  close_cleaning();
  flush_cleanings(out);
}

void ChannelQc::begin_maintenance(std::int64_t t) {
  if (maintenance_since_) return;
  maintenance_since_ = t;
  close_cleaning();  // the next maintenance begins: the step goes with what it has
}

void ChannelQc::end_maintenance(std::int64_t t) {
  if (!maintenance_since_) return;
  last_maintenance_ = MaintenancePeriod{*maintenance_since_, t};
  OpenCleaning c;
  c.step.maintenance_start = *maintenance_since_;
  c.step.maintenance_end = t;
  c.before.assign(recent_.begin(), recent_.end());
  cleaning_ = std::move(c);
  recent_.clear();
  maintenance_since_.reset();
  reset_lookback();
  for (auto& c : checks_)
    if (auto* f = std::get_if<FoulingDriftCheck>(&c)) f->restart_reference();
}

QcSnapshot ChannelQc::snapshot() const {
  QcSnapshot s;
  s.last_t = last_t_ ? last_t_ : floor_t_;
  s.maintenance_since = maintenance_since_;
  s.last_maintenance = last_maintenance_;
  for (const auto& c : checks_)
    if (const auto* f = std::get_if<FoulingDriftCheck>(&c)) s.fouling.push_back(f->state());
  return s;
}

void ChannelQc::restore(const QcSnapshot& s) {
  floor_t_ = s.last_t;
  maintenance_since_ = s.maintenance_since;
  last_maintenance_ = s.last_maintenance;
  std::size_t k = 0;
  for (auto& c : checks_) {
    if (auto* f = std::get_if<FoulingDriftCheck>(&c); f && k < s.fouling.size())
      f->restore(s.fouling[k++]);
  }
}

std::size_t ChannelQc::state_bytes() const {
  std::size_t n = sizeof(*this) + checks_.capacity() * sizeof(Check) +
                  config_.tests.capacity() * sizeof(QcTestParams);
  for (const auto& t : config_.tests)
    if (const auto* c = std::get_if<ClimatologyParams>(&t))
      n += c->ranges.capacity() * sizeof(ClimatologyRange);
  for (const auto& c : checks_) {
    std::visit(Overloaded{[](const std::monostate&) {}, [](const FoulingDriftCheck&) {},
                          [&](const auto& check) { n += check.heap_bytes(); }},
               c);
  }
  return n;
}

}  // namespace tarn::pipeline
