#include "daemon/uplink/link_policy.h"

#include <algorithm>
#include <cstdio>

#include "config/json_reader.h"

namespace tarn::uplink {

using config::Need;
using config::ObjectReader;

namespace {

constexpr std::int64_t kDay = 86400;

bool parse_hhmm(const std::string& s, int& minutes) {
  if (s.size() != 5 || s[2] != ':') return false;
  for (int i : {0, 1, 3, 4})
    if (s[i] < '0' || s[i] > '9') return false;
  int h = (s[0] - '0') * 10 + (s[1] - '0'), m = (s[3] - '0') * 10 + (s[4] - '0');
  if (h > 23 || m > 59) return false;
  minutes = h * 60 + m;
  return true;
}

std::optional<CommandSpec> read_command(ObjectReader& parent, const std::string& key) {
  const config::Json* j = parent.object(key);
  if (!j) return std::nullopt;
  std::string ptr = parent.pointer_of(key);
  ObjectReader r(*j, ptr, parent.problems());
  CommandSpec c;
  if (const config::Json* a = r.array("argv", Need::required)) {
    for (std::size_t i = 0; i < a->size(); ++i) {
      const auto& e = (*a)[i];
      if (!e.is_string() || e.get<std::string>().empty() ||
          e.get<std::string>().find('\0') != std::string::npos) {
        parent.problems().add(ptr + "/argv/" + std::to_string(i),
                              "is not a non-empty string; allowed: program and arguments");
        continue;
      }
      c.argv.push_back(e.get<std::string>());
    }
    if (a->empty())
      parent.problems().add(ptr + "/argv", "is empty; allowed: [\"/absolute/program\", args...]");
    else if (!c.argv.empty() && c.argv[0].front() != '/')
      parent.problems().add(ptr + "/argv/0", "is \"" + c.argv[0] +
                                                 "\"; allowed: an absolute path (no shell, "
                                                 "no PATH search)");
  }
  r.integer("timeout_s", c.timeout_s, 1, 600);
  r.finish();
  return c;
}

}  // namespace

LinkPolicyConfig read_link_policy(const config::StationConfig& cfg, config::Problems& p) {
  LinkPolicyConfig o;
  if (cfg.uplink.policy.is_null()) return o;
  const std::string base = cfg.uplink.pointer + "/policy";
  ObjectReader r(cfg.uplink.policy, base, p);
  std::string mode = "always";
  r.one_of("mode", mode, {"always", "scheduled"});
  o.scheduled = mode == "scheduled";
  bool has_interval = r.integer("interval_min", o.interval_min, 1, 10080);
  bool has_times = false;
  if (const config::Json* t = r.array("times_utc")) {
    for (std::size_t i = 0; i < t->size(); ++i) {
      int m = 0;
      if (!(*t)[i].is_string() || !parse_hhmm((*t)[i].get<std::string>(), m)) {
        p.add(base + "/times_utc/" + std::to_string(i), "is not allowed; allowed: \"HH:MM\" (UTC)");
        continue;
      }
      o.times_min.push_back(m);
    }
    std::sort(o.times_min.begin(), o.times_min.end());
    o.times_min.erase(std::unique(o.times_min.begin(), o.times_min.end()), o.times_min.end());
    has_times = !o.times_min.empty();
  }
  bool has_max = r.integer("max_connected_s", o.max_connected_s, 10, 86400);
  bool has_linger = r.integer("linger_s", o.linger_s, 0, 3600);
  o.link_up = read_command(r, "link_up");
  o.link_down = read_command(r, "link_down");
  r.integer("daily_budget_bytes", o.daily_budget_bytes, 0, std::int64_t(1) << 40);
  if (o.scheduled && !has_interval && !has_times)
    p.add(base,
          "has mode \"scheduled\" without interval_min or times_utc; allowed: either or both");
  if (!o.scheduled) {
    for (auto [has, key] : {std::pair{has_interval, "interval_min"},
                            {has_times, "times_utc"},
                            {has_max, "max_connected_s"},
                            {has_linger, "linger_s"}})
      if (has)
        p.add(base + "/" + key,
              "is set but mode is \"always\"; allowed only with mode \"scheduled\"");
  }
  r.finish();
  return o;
}

void validate_link_policy(const config::StationConfig& cfg, config::Problems& p) {
  read_link_policy(cfg, p);
}

std::optional<std::int64_t> next_planned(const LinkPolicyConfig& p, std::int64_t t) {
  if (!p.scheduled) return std::nullopt;
  std::optional<std::int64_t> best;
  auto consider = [&](std::int64_t c) {
    if (!best || c < *best) best = c;
  };
  if (p.interval_min > 0) {
    std::int64_t step = std::int64_t(p.interval_min) * 60;
    std::int64_t floor = t >= 0 ? t / step * step : -((-t + step - 1) / step) * step;
    consider(floor == t ? t : floor + step);
  }
  if (!p.times_min.empty()) {
    std::int64_t day = (t >= 0 ? t / kDay : (t - kDay + 1) / kDay) * kDay;
    for (int d = 0; d < 2; ++d)
      for (int m : p.times_min) {
        std::int64_t c = day + d * kDay + std::int64_t(m) * 60;
        if (c >= t) consider(c);
      }
  }
  return best;
}

LinkSchedule::LinkSchedule(LinkPolicyConfig cfg, std::int64_t now)
    : cfg_(std::move(cfg)), next_due_(next_planned(cfg_, now)) {}

LinkDecision LinkSchedule::decide(const LinkView& v) {
  if (!cfg_.scheduled) {
    if (!v.open) return {LinkAction::open, "mode always"};
    return {};
  }
  bool due = next_due_ && v.now >= *next_due_;
  if (due) next_due_ = next_planned(cfg_, v.now + 1);  // a planned slot is used or skipped once
  if (!v.open) {
    if (v.unsent_alerts > 0) return {LinkAction::open, "alert waiting"};
    if (due && v.budget_left) return {LinkAction::open, "planned connection"};
    if (due) return {LinkAction::none, "planned connection skipped: daily budget used"};
    return {};
  }
  if (v.unsent_alerts == 0 && v.now - v.opened_t >= cfg_.max_connected_s)
    return {LinkAction::close, "max_connected_s reached"};
  if (v.drained_t > 0 && v.now - v.drained_t >= cfg_.linger_s)
    return {LinkAction::close, v.budget_left ? "outbox drained" : "daily budget used"};
  return {};
}

void DailyUsage::roll(std::int64_t now) {
  std::int64_t d = now >= 0 ? now / kDay : (now - kDay + 1) / kDay;
  if (d != day) {
    day = d;
    bytes = 0;
  }
}

void DailyUsage::add(std::int64_t now, std::int64_t n) {
  roll(now);
  bytes += n;
}

std::string DailyUsage::serialize() const {
  return std::to_string(day) + " " + std::to_string(bytes);
}

DailyUsage DailyUsage::parse(const std::string& text, std::int64_t now) {
  DailyUsage u;
  long long d = 0, b = 0;
  if (std::sscanf(text.c_str(), "%lld %lld", &d, &b) == 2 && b >= 0) {
    u.day = d;
    u.bytes = b;
  }
  u.roll(now);
  return u;
}

}  // namespace tarn::uplink
