#include "config/settings/alert_settings.h"

#include <algorithm>
#include <cmath>

namespace tarn::pipeline {

std::string_view statistic_name(Statistic s) {
  switch (s) {
    case Statistic::mean:
      return "mean";
    case Statistic::median:
      return "median";
    case Statistic::max:
      return "max";
  }
  return "?";
}

std::vector<std::uint32_t> alert_masks_for(std::string_view channel,
                                           const std::vector<AlertRule>& rules) {
  std::vector<std::uint32_t> out;
  auto add = [&](std::uint32_t m) {
    if (std::find(out.begin(), out.end(), m) == out.end()) out.push_back(m);
  };
  for (const auto& r : rules) {
    bool reads = r.channel == channel;
    for (const auto& l : r.levels)
      for (const auto& c : l.conditions) reads = reads || c.channel == channel;
    if (reads) add(r.accept_doubts);
  }
  return out;
}

std::vector<AlertProblem> check_alert_rules(const std::vector<AlertRule>& rules,
                                            const std::vector<ChannelInfo>& channels) {
  std::vector<AlertProblem> out;
  auto channel = [&](const std::string& n) -> const ChannelInfo* {
    for (const auto& c : channels)
      if (c.name == n) return &c;
    return nullptr;
  };
  auto check_stat = [&](const std::string& where, const std::string& ch, Statistic s) {
    const ChannelInfo* c = channel(ch);
    if (!c) {
      out.push_back({where + "/channel", "unknown channel '" + ch + "'"});
    } else if (s == Statistic::median && !c->median) {
      out.push_back({where + "/statistic", "median needs the channel's window median turned on"});
    }
  };
  for (std::size_t i = 0; i < rules.size(); ++i) {
    const AlertRule& r = rules[i];
    std::string at = "/";  // built in steps: GCC 12 warns falsely on "/" + to_string()
    at += std::to_string(i);
    if (r.name.empty()) out.push_back({at + "/name", "must not be empty"});
    for (std::size_t j = 0; j < i; ++j)
      if (rules[j].name == r.name) out.push_back({at + "/name", "rule name used twice"});
    check_stat(at, r.channel, r.statistic);
    if (r.levels.empty()) out.push_back({at + "/levels", "must list at least one level"});
    for (std::size_t k = 0; k < r.levels.size(); ++k) {
      const AlertLevel& l = r.levels[k];
      const std::string lat = at + "/levels/" + std::to_string(k);
      if (l.name.empty()) out.push_back({lat + "/name", "must not be empty"});
      if (!std::isfinite(l.threshold)) out.push_back({lat + "/threshold", "must be finite"});
      if (k > 0 && !(l.threshold > r.levels[k - 1].threshold))
        out.push_back({lat + "/threshold", "must be greater than the level below"});
      for (std::size_t m = 0; m < k; ++m)
        if (r.levels[m].name == l.name) out.push_back({lat + "/name", "level name used twice"});
      for (std::size_t c = 0; c < l.conditions.size(); ++c)
        check_stat(lat + "/conditions/" + std::to_string(c), l.conditions[c].channel,
                   l.conditions[c].statistic);
    }
    if (!(r.hysteresis >= 0)) out.push_back({at + "/hysteresis", "must be >= 0"});
    if (r.raise_windows < 1) out.push_back({at + "/raise_windows", "must be >= 1"});
    if (r.clear_windows < 1) out.push_back({at + "/clear_windows", "must be >= 1"});
    if (r.renotify_s < 0) out.push_back({at + "/renotify_s", "must be >= 0 (0 = never)"});
    if (r.min_count < 1) out.push_back({at + "/min_count", "must be >= 1"});
  }
  return out;
}

}  // namespace tarn::pipeline
