// Alert rule settings: what a station's "alerts" block says (config/README.md,
// "Station alerts"), as plain structs the config fills and the pipeline's
// AlertEvaluator (daemon/pipeline/alert_rules.h) runs. Pure data and pure
// checks; standard library only. The rules' behaviour is described in
// daemon/pipeline/alert_rules.h.
#pragma once

#include <cstdint>
#include <optional>
#include <string>
#include <string_view>
#include <vector>

#include "config/settings/reasons.h"

namespace tarn::pipeline {

enum class Statistic : std::uint8_t { mean, median, max };
std::string_view statistic_name(Statistic s);

enum class Compare : std::uint8_t { above, below };

struct AlertCondition {
  std::string channel;
  Statistic statistic = Statistic::mean;
  Compare compare = Compare::below;  // channel's statistic must be above/below ...
  std::optional<double> value;       // ... this value, or the rule's value when empty
};

struct AlertLevel {
  std::string name;
  double threshold = 0;
  std::vector<AlertCondition> conditions;
};

struct AlertRule {
  std::string name;
  std::string channel;
  Statistic statistic = Statistic::mean;
  std::vector<AlertLevel> levels;  // ascending thresholds
  double hysteresis = 0;           // channel units
  std::uint32_t raise_windows = 1;
  std::uint32_t clear_windows = 1;
  std::int64_t renotify_s = 0;
  std::uint32_t min_count = 1;
  // Doubts (reason bits) a suspect sample may carry and still count.
  std::uint32_t accept_doubts = reason::solar_quenching | reason::fouling_drift;
  std::uint32_t stale_windows = 6;  // 0 = never stale; common practice, no source
};

// The distinct accept_doubts masks of the rules that read `channel` (as the
// rule channel or in a condition), in first-use order: WindowConfig::alert_masks.
std::vector<std::uint32_t> alert_masks_for(std::string_view channel,
                                           const std::vector<AlertRule>& rules);

struct AlertProblem {
  std::string where;  // "/alerts/0/levels/1/threshold"-like, relative to the rule list
  std::string message;
};
// channels: the station's channel names with whether each keeps a median.
struct ChannelInfo {
  std::string name;
  bool median = false;
};
std::vector<AlertProblem> check_alert_rules(const std::vector<AlertRule>& rules,
                                            const std::vector<ChannelInfo>& channels);

}  // namespace tarn::pipeline
