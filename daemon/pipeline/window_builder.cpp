#include "daemon/pipeline/window_builder.h"

#include <algorithm>
#include <cmath>
#include <stdexcept>
#include <string>

namespace tarn::pipeline {

using codec::Flag;

bool accepted_for_alerts(const FlaggedSample& s, std::uint32_t accept) {
  if (!s.value) return false;
  if (s.flag == Flag::pass) return true;
  return s.flag == Flag::suspect && (s.reasons & ~kNotDoubts & ~accept) == 0;
}

const MaskedStats* WindowSummary::alert_stats_for(std::uint32_t accept) const {
  for (const auto& m : alert_stats)
    if (m.accept == accept) return &m;
  return nullptr;
}

void StatsAccumulator::add(std::int64_t t, double v, bool keep, std::size_t cap) {
  if (n == 0) {
    min = max = v;
    first_t = last_t = t;
  } else {
    min = std::min(min, v);
    max = std::max(max, v);
    first_t = std::min(first_t, t);
    last_t = std::max(last_t, t);
  }
  ++n;
  const double d = v - mean;
  mean += d / n;
  m2 += d * (v - mean);
  if (keep && values.size() < cap) values.push_back(v);
}

void StatsAccumulator::clear() {
  n = 0;
  mean = m2 = min = max = 0;
  first_t = last_t = 0;
  values.clear();
}

WindowStats StatsAccumulator::result(bool median) {
  WindowStats st;
  st.count = n;
  st.mean = mean;
  st.min = min;
  st.max = max;
  st.sd = n > 1 ? std::sqrt(std::max(0.0, m2 / (n - 1))) : 0.0;
  st.first_t = first_t;
  st.last_t = last_t;
  if (median && !values.empty()) {
    const std::size_t k = values.size();
    auto mid = values.begin() + static_cast<std::ptrdiff_t>(k / 2);
    std::nth_element(values.begin(), mid, values.end());
    double m = *mid;
    if (k % 2 == 0) m = (m + *std::max_element(values.begin(), mid)) / 2.0;
    st.median = m;
  }
  return st;
}

std::size_t WindowBuilder::state_bytes() const {
  std::size_t n = sizeof(*this) + acc_.capacity() * sizeof(StatsAccumulator) +
                  config_.alert_masks.capacity() * sizeof(std::uint32_t);
  for (const auto& a : acc_) n += a.values.capacity() * sizeof(double);
  return n;
}

std::uint32_t WindowSummary::total() const {
  std::uint32_t n = 0;
  for (auto c : flag_counts) n += c;
  return n;
}

WindowBuilder::WindowBuilder(WindowConfig config, std::int64_t poll_interval_s)
    : config_(config), interval_(poll_interval_s) {
  if (auto p = check_window_config(config_, interval_))
    throw std::invalid_argument(std::string("WindowBuilder: ") + p->where + ": " + p->message);
  acc_.resize(2 + config_.alert_masks.size());
  if (config_.median) {
    values_cap_ = 2 * static_cast<std::size_t>(expected_for(config_.window_s)) + 8;
    for (auto& a : acc_) a.values.reserve(values_cap_);
  }
}

std::int64_t WindowBuilder::window_start_of(std::int64_t t) const {
  const std::int64_t w = config_.window_s;
  const std::int64_t q = t >= 0 ? t / w : -((-t + w - 1) / w);
  return q * w;
}

std::uint32_t WindowBuilder::expected_for(std::int64_t covered_s) const {
  if (covered_s <= 0) return 0;
  return static_cast<std::uint32_t>((covered_s + interval_ - 1) / interval_);
}

void WindowBuilder::open_at(std::int64_t start, std::int64_t covered_start, bool partial) {
  open_.emplace();
  open_->start = start;
  open_->covered_start = covered_start;
  open_->partial_start = partial;
  for (auto& a : acc_) a.clear();
}

void WindowBuilder::start(std::int64_t t, std::vector<WindowSummary>&) {
  if (open_) return;
  const std::int64_t ws = window_start_of(t);
  if (last_closed_end_ && ws < *last_closed_end_) {
    open_at(*last_closed_end_, *last_closed_end_, false);
  } else {
    open_at(ws, t, t > ws);
  }
}

void WindowBuilder::add(const FlaggedSample& s) {
  Open& w = *open_;
  ++w.counts[flag_slot(s.flag)];
  w.reasons |= s.reasons;
  if (s.flag != Flag::missing) w.any_value = true;
  if (!s.value) return;
  const double v = *s.value;
  const bool keep = config_.median;
  if (s.flag == Flag::pass || (config_.include_suspect && s.flag == Flag::suspect)) {
    acc_[0].add(s.t, v, keep, values_cap_);
  } else if (s.flag == Flag::not_evaluated) {
    acc_[1].add(s.t, v, keep, values_cap_);
  }
  for (std::size_t k = 0; k < config_.alert_masks.size(); ++k)
    if (accepted_for_alerts(s, config_.alert_masks[k])) acc_[2 + k].add(s.t, v, keep, values_cap_);
}

void WindowBuilder::close(std::int64_t covered_end, std::vector<WindowSummary>& out) {
  const Open& w = *open_;
  WindowSummary s;
  s.start = w.start;
  s.end = w.start + config_.window_s;
  s.covered_start = w.covered_start;
  s.covered_end = std::min(covered_end, s.end);
  s.partial = w.partial_start || s.covered_end < s.end;
  s.expected_count = expected_for(s.covered_end - s.covered_start);
  s.flag_counts = w.counts;
  s.reasons = w.reasons;
  const bool used = acc_[0].n > 0;
  if (used) {
    s.stats = acc_[0].result(config_.median);
  } else if (acc_[1].n > 0) {
    s.stats = acc_[1].result(config_.median);
    s.stats->basis = StatsBasis::not_evaluated;
  }
  for (std::size_t k = 0; k < config_.alert_masks.size(); ++k) {
    MaskedStats m;
    m.accept = config_.alert_masks[k];
    if (acc_[2 + k].n > 0) m.stats = acc_[2 + k].result(config_.median);
    s.alert_stats.push_back(m);
  }
  const std::uint32_t passed = s.count(Flag::pass);
  if (!w.any_value) {
    s.flag = Flag::missing;
  } else if (used) {
    s.flag = passed >= config_.min_pass_fraction * s.expected_count && passed > 0 ? Flag::pass
                                                                                  : Flag::suspect;
  } else if (s.count(Flag::fail) > 0) {
    s.flag = Flag::fail;
  } else if (s.count(Flag::suspect) > 0) {
    s.flag = Flag::suspect;
  } else {
    s.flag = Flag::not_evaluated;
  }
  out.push_back(std::move(s));
  ++counters_.emitted;
  last_closed_end_ = out.back().end;
  open_.reset();
  for (auto& a : acc_) a.clear();
}

void WindowBuilder::advance(std::int64_t t, std::vector<WindowSummary>& out) {
  if (!open_) return;
  const std::int64_t end = open_->start + config_.window_s;
  if (end > t) return;
  close(end, out);
  const std::int64_t target = window_start_of(t);
  std::int64_t next = end;
  for (std::uint32_t n = 0; next < target && n < config_.max_empty_windows; ++n) {
    open_at(next, next, false);
    close(next + config_.window_s, out);
    next += config_.window_s;
  }
  if (next < target)
    counters_.skipped_windows += static_cast<std::uint64_t>((target - next) / config_.window_s);
  open_at(target, target, false);
}

void WindowBuilder::push(const FlaggedSample& s, std::vector<WindowSummary>& out) {
  if (!open_) start(s.t, out);
  if (s.t < open_->start) {
    ++counters_.dropped_old;
    return;
  }
  advance(s.t, out);
  add(s);
}

void WindowBuilder::stop(std::int64_t t, std::vector<WindowSummary>& out) {
  if (!open_) return;
  advance(t, out);
  if (t > open_->covered_start || open_->counts != decltype(open_->counts){}) {
    close(std::max(t, open_->covered_start), out);
  } else {
    open_.reset();
  }
}

}  // namespace tarn::pipeline
