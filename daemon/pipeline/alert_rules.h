// Alert rules on closed windows: a channel's window statistic against ordered
// levels, with conditions on other channels, persistence, hysteresis and a
// re-notify interval. Pure; not thread-safe.
//
// CAUTION: alert levels support and never replace laboratory analysis and the
// decisions of the local health or water authority. A stale level (below)
// says the station can no longer see the water: it is no all-clear.
//
// Per rule and window set (AlertEvaluator::on_windows):
//  - the value is the rule channel's statistic (mean, median or max) over the
//    window's samples whose only doubts the rule accepts: the passed samples
//    and the suspect ones whose reason bits are all in accept_doubts (default
//    solar_quenching and fouling_drift: quenching lowers a reading and
//    fouling raises it slowly; neither invents a bloom). These are the
//    window's alert stats for the rule's mask (window_builder.h); the
//    channel's include_suspect does not matter here. Not-evaluated stats
//    (basis not_evaluated) are never used: nothing vouches for those values.
//    A window without the value (no window, fewer than min_count such
//    samples, or no median kept) is no evidence: the level holds, raising
//    streaks restart, clearing streaks hold.
//  - stale: a raised level (> 0) whose rule has had no value for
//    stale_windows consecutive window sets (0 = never) becomes stale: one
//    event `stale` with a cause from the rule channel's last window (no window
//    or no value and reason offline -> instrument_offline; no value ->
//    no_values; values but none usable -> all_failed_qc). The level holds.
//    When a value returns, one event `resumed` (with the value), then the
//    window is evaluated as usual.
//  - level k qualifies when value >= levels[k].threshold and all of the
//    level's conditions hold. A condition compares another channel's statistic
//    with a constant (`value`) or, without one, with the rule's value; a
//    condition whose channel has no statistic does not hold. Conditions read
//    the other channels' alert stats with the rule's accept_doubts mask.
//  - raise: to the highest level above the current one that qualified in
//    raise_windows consecutive windows (persistence). One event, even when
//    several levels are passed at once.
//  - lower: when value < threshold(current) - hysteresis in clear_windows
//    consecutive windows, to the highest lower level j with
//    value >= threshold(j) - hysteresis (conditions are not re-checked), or to
//    no level. Lowering needs no persistence of the lower level.
//  - re-notify: while a level stands, a reminder event when renotify_s (0 =
//    never) have passed since the last event of the rule, counted on window
//    end times.
//  - a window set at or before the last one seen by the rule is ignored (a
//    re-delivery after restart changes nothing).
#pragma once

#include <cstdint>
#include <optional>
#include <string>
#include <string_view>
#include <vector>

#include "config/settings/alert_settings.h"
#include "config/settings/reasons.h"
#include "daemon/pipeline/window_collator.h"

namespace tarn::pipeline {

enum class AlertChange : std::uint8_t { raised, lowered, cleared, reminder, stale, resumed };
std::string_view alert_change_name(AlertChange c);

// Why a level went stale (AlertChange::stale); none on other events.
enum class StaleCause : std::uint8_t {
  none = 0,
  instrument_offline = 1,
  no_values = 2,
  all_failed_qc = 3
};
std::string_view stale_cause_name(StaleCause c);

struct ConditionEvidence {
  std::string channel;
  Statistic statistic = Statistic::mean;
  std::optional<double> value;
  bool held = false;
};

// Level 0 is "no level"; level k >= 1 is rule.levels[k - 1].
struct AlertEvent {
  std::string rule;
  AlertChange change = AlertChange::raised;
  std::uint32_t from_level = 0, to_level = 0;
  std::string from_name, to_name;  // empty for level 0
  std::string channel;
  Statistic statistic = Statistic::mean;
  double value = 0;
  double threshold = 0;  // raised: the level's threshold; lowered/cleared: the clear line;
                         // stale: the standing level's threshold, and value 0 (there is none)
  std::uint32_t used_count = 0;
  StaleCause stale_cause = StaleCause::none;
  std::int64_t window_start = 0, window_end = 0;
  std::vector<ConditionEvidence> conditions;  // of the level raised to
};

// The state of one rule: small, plain, for the daemon to persist.
struct AlertRuleState {
  std::string rule;
  std::uint32_t level = 0;
  std::vector<std::uint32_t> raise_streak;  // per level
  std::uint32_t clear_streak = 0;
  std::optional<std::int64_t> last_event_end;  // window end of the last event
  std::optional<std::int64_t> last_window_start;
  std::uint32_t no_value_windows = 0;  // consecutive window sets without a value
  bool stale = false;
  StaleCause stale_cause = StaleCause::none;
};
struct AlertSnapshot {
  std::vector<AlertRuleState> rules;
};
struct AlertRestoreReport {
  std::uint32_t restored = 0;
  std::vector<std::string> notes;  // rules unknown now, levels clamped
};

class AlertEvaluator {
 public:
  // REQUIRES: check_alert_rules(rules, ...) empty; throws std::invalid_argument
  // for levels out of order or empty.
  explicit AlertEvaluator(std::vector<AlertRule> rules);

  void on_windows(const WindowSet& set, std::vector<AlertEvent>& out);

  // Current level per rule, in rule order (0 = none).
  std::uint32_t level(std::size_t rule) const { return states_[rule].level; }
  std::string_view level_name(std::size_t rule) const;
  // Whether the rule's standing level is stale (no value for stale_windows).
  bool stale(std::size_t rule) const { return states_[rule].stale; }
  StaleCause stale_cause(std::size_t rule) const { return states_[rule].stale_cause; }
  const std::vector<AlertRule>& rules() const { return rules_; }

  AlertSnapshot snapshot() const { return {states_}; }
  // Matches states by rule name; streak vectors are resized to the levels.
  AlertRestoreReport restore(const AlertSnapshot& s);

 private:
  void evaluate(std::size_t i, const WindowSet& set, std::vector<AlertEvent>& out);
  std::vector<AlertRule> rules_;
  std::vector<AlertRuleState> states_;
};

// The statistic of a window for alerts, if it has one with at least
// min_count samples: from its alert stats for the mask `accept` when it has
// them, else (a window built without alert masks) from its stats. Empty for
// stats with basis not_evaluated.
std::optional<double> window_statistic(const WindowSummary& w, Statistic s,
                                       std::uint32_t min_count = 1,
                                       std::uint32_t accept = reason::solar_quenching |
                                                              reason::fouling_drift);

}  // namespace tarn::pipeline
