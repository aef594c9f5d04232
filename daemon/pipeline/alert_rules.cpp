#include "daemon/pipeline/alert_rules.h"

#include <algorithm>
#include <cmath>
#include <stdexcept>

namespace tarn::pipeline {

using codec::Flag;

std::string_view alert_change_name(AlertChange c) {
  switch (c) {
    case AlertChange::raised:
      return "raised";
    case AlertChange::lowered:
      return "lowered";
    case AlertChange::cleared:
      return "cleared";
    case AlertChange::reminder:
      return "reminder";
    case AlertChange::stale:
      return "stale";
    case AlertChange::resumed:
      return "resumed";
  }
  return "?";
}

std::string_view stale_cause_name(StaleCause c) {
  switch (c) {
    case StaleCause::none:
      return "none";
    case StaleCause::instrument_offline:
      return "instrument_offline";
    case StaleCause::no_values:
      return "no_values";
    case StaleCause::all_failed_qc:
      return "all_failed_qc";
  }
  return "?";
}

std::optional<double> window_statistic(const WindowSummary& w, Statistic s, std::uint32_t min_count,
                                       std::uint32_t accept) {
  const MaskedStats* m = w.alert_stats_for(accept);
  const std::optional<WindowStats>& st = m ? m->stats : w.stats;
  if (!st || st->basis != StatsBasis::used || st->count < min_count) return std::nullopt;
  switch (s) {
    case Statistic::mean:
      return st->mean;
    case Statistic::max:
      return st->max;
    case Statistic::median:
      return st->median;
  }
  return std::nullopt;
}

AlertEvaluator::AlertEvaluator(std::vector<AlertRule> rules) : rules_(std::move(rules)) {
  for (const auto& r : rules_) {
    if (r.levels.empty()) throw std::invalid_argument("AlertEvaluator: rule without levels");
    for (std::size_t k = 1; k < r.levels.size(); ++k)
      if (!(r.levels[k].threshold > r.levels[k - 1].threshold))
        throw std::invalid_argument("AlertEvaluator: levels not in ascending order");
    AlertRuleState s;
    s.rule = r.name;
    s.raise_streak.assign(r.levels.size(), 0);
    states_.push_back(std::move(s));
  }
}

std::string_view AlertEvaluator::level_name(std::size_t rule) const {
  const std::uint32_t l = states_[rule].level;
  return l == 0 ? std::string_view{} : std::string_view{rules_[rule].levels[l - 1].name};
}

void AlertEvaluator::on_windows(const WindowSet& set, std::vector<AlertEvent>& out) {
  for (std::size_t i = 0; i < rules_.size(); ++i) evaluate(i, set, out);
}

namespace {

std::uint32_t used_count_of(const WindowSummary& w, std::uint32_t accept) {
  const MaskedStats* m = w.alert_stats_for(accept);
  const std::optional<WindowStats>& st = m ? m->stats : w.stats;
  return st ? st->count : 0;
}

std::vector<ConditionEvidence> conditions_of(const AlertLevel& level, const WindowSet& set,
                                             double rule_value, std::uint32_t accept,
                                             bool& all_held) {
  std::vector<ConditionEvidence> ev;
  all_held = true;
  for (const auto& c : level.conditions) {
    ConditionEvidence e{c.channel, c.statistic, std::nullopt, false};
    if (const WindowSummary* w = set.find(c.channel))
      e.value = window_statistic(*w, c.statistic, 1, accept);
    if (e.value) {
      const double ref = c.value ? *c.value : rule_value;
      e.held = c.compare == Compare::above ? *e.value > ref : *e.value < ref;
    }
    all_held = all_held && e.held;
    ev.push_back(std::move(e));
  }
  return ev;
}

// Why a rule channel's window gave no value.
StaleCause cause_of(const WindowSummary* w) {
  const bool any_value = w && w->total() > w->count(Flag::missing);
  if (!any_value) {
    const bool offline = w && (w->reasons & reason::offline);
    return offline ? StaleCause::instrument_offline : StaleCause::no_values;
  }
  return StaleCause::all_failed_qc;
}

}  // namespace

void AlertEvaluator::evaluate(std::size_t i, const WindowSet& set, std::vector<AlertEvent>& out) {
  const AlertRule& r = rules_[i];
  AlertRuleState& st = states_[i];
  if (st.last_window_start && set.start <= *st.last_window_start) return;
  st.last_window_start = set.start;

  const WindowSummary* w = set.find(r.channel);
  const std::optional<double> x =
      w ? window_statistic(*w, r.statistic, r.min_count, r.accept_doubts) : std::nullopt;
  auto stale_event = [&](AlertChange c, StaleCause cause) {
    AlertEvent e;
    e.rule = r.name;
    e.change = c;
    e.from_level = e.to_level = st.level;
    e.from_name = e.to_name = r.levels[st.level - 1].name;
    e.channel = r.channel;
    e.statistic = r.statistic;
    e.value = x ? *x : 0.0;
    e.threshold = r.levels[st.level - 1].threshold;
    e.used_count = x ? used_count_of(*w, r.accept_doubts) : 0;
    e.stale_cause = cause;
    e.window_start = set.start;
    e.window_end = set.end;
    out.push_back(std::move(e));
    st.last_event_end = set.end;
  };
  if (!x) {
    std::fill(st.raise_streak.begin(), st.raise_streak.end(), 0);
    ++st.no_value_windows;
    if (st.level > 0 && r.stale_windows > 0 && !st.stale &&
        st.no_value_windows >= r.stale_windows) {
      st.stale = true;
      st.stale_cause = cause_of(w);
      stale_event(AlertChange::stale, st.stale_cause);
    }
    return;
  }
  st.no_value_windows = 0;
  if (st.stale) {
    st.stale = false;
    st.stale_cause = StaleCause::none;
    if (st.level > 0) stale_event(AlertChange::resumed, StaleCause::none);
  }
  const auto n = static_cast<std::uint32_t>(r.levels.size());
  for (std::uint32_t k = 0; k < n; ++k) {
    bool held = true;
    if (!r.levels[k].conditions.empty()) conditions_of(r.levels[k], set, *x, r.accept_doubts, held);
    const bool q = *x >= r.levels[k].threshold && held;
    st.raise_streak[k] = q ? st.raise_streak[k] + 1 : 0;
  }

  auto event = [&](AlertChange c, std::uint32_t to, double threshold) {
    AlertEvent e;
    e.rule = r.name;
    e.change = c;
    e.from_level = st.level;
    e.to_level = to;
    if (st.level) e.from_name = r.levels[st.level - 1].name;
    if (to) e.to_name = r.levels[to - 1].name;
    e.channel = r.channel;
    e.statistic = r.statistic;
    e.value = *x;
    e.threshold = threshold;
    e.used_count = used_count_of(*w, r.accept_doubts);
    e.window_start = set.start;
    e.window_end = set.end;
    if (c == AlertChange::raised) {
      bool held = true;
      e.conditions = conditions_of(r.levels[to - 1], set, *x, r.accept_doubts, held);
    }
    out.push_back(std::move(e));
    if (c != AlertChange::reminder) st.clear_streak = 0;
    st.level = to;
    st.last_event_end = set.end;
  };

  for (std::uint32_t k = n; k > st.level; --k) {
    if (st.raise_streak[k - 1] >= r.raise_windows) {
      event(AlertChange::raised, k, r.levels[k - 1].threshold);
      return;
    }
  }
  if (st.level == 0) return;
  const double clear_line = r.levels[st.level - 1].threshold - r.hysteresis;
  if (*x < clear_line) {
    if (++st.clear_streak >= r.clear_windows) {
      std::uint32_t to = 0;
      for (std::uint32_t j = st.level - 1; j >= 1; --j) {
        if (*x >= r.levels[j - 1].threshold - r.hysteresis) {
          to = j;
          break;
        }
      }
      event(to ? AlertChange::lowered : AlertChange::cleared, to, clear_line);
      return;
    }
  } else {
    st.clear_streak = 0;
  }
  if (r.renotify_s > 0 && st.last_event_end && set.end - *st.last_event_end >= r.renotify_s)
    event(AlertChange::reminder, st.level, r.levels[st.level - 1].threshold);
}

AlertRestoreReport AlertEvaluator::restore(const AlertSnapshot& s) {
  AlertRestoreReport rep;
  for (const auto& saved : s.rules) {
    auto it = std::find_if(rules_.begin(), rules_.end(),
                           [&](const AlertRule& r) { return r.name == saved.rule; });
    if (it == rules_.end()) {
      rep.notes.push_back("rule '" + saved.rule +
                          "' is no longer configured; its state is dropped");
      continue;
    }
    const auto i = static_cast<std::size_t>(it - rules_.begin());
    AlertRuleState st = saved;
    const auto n = static_cast<std::uint32_t>(it->levels.size());
    if (st.level > n) {
      rep.notes.push_back("rule '" + saved.rule + "': level " + std::to_string(st.level) +
                          " clamped to " + std::to_string(n));
      st.level = n;
    }
    st.raise_streak.resize(n, 0);
    states_[i] = std::move(st);
    ++rep.restored;
  }
  return rep;
}

}  // namespace tarn::pipeline
