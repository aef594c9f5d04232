// Link policy: when the uplink is connected. Config block "uplink": {"policy": {...}}:
//   "mode": "always" (default) | "scheduled"
//   "interval_min": N          scheduled: connect every N minutes (aligned to UTC)
//   "times_utc": ["HH:MM"...]  scheduled: and/or at these times each UTC day
//   "max_connected_s": S       scheduled: disconnect after S s even with a backlog
//   "linger_s": S              scheduled: stay up S s after the outbox is empty (commands)
//   "link_up" / "link_down": {"argv": ["/abs/path", "arg"...], "timeout_s": T}
//   "daily_budget_bytes": B    metered links: stop non-alert sends once B bytes
//                              went out this UTC day (0: no budget)
// An unsent alert opens the link at once in either mode and is exempt from the budget.
// LinkSchedule is pure: times and counts in, a decision out (no clock, no I/O).
// Thread-safety: none needed (single thread).
#pragma once

#include <cstdint>
#include <optional>
#include <string>
#include <vector>

#include "config/problems.h"
#include "config/station_config.h"

namespace tarn::uplink {

struct CommandSpec {
  std::vector<std::string> argv;  // argv[0] an absolute path; run without a shell
  int timeout_s = 30;
};

struct LinkPolicyConfig {
  bool scheduled = false;
  int interval_min = 0;        // 0: none
  std::vector<int> times_min;  // minutes after 00:00 UTC, sorted, unique
  int max_connected_s = 900;
  int linger_s = 30;
  std::optional<CommandSpec> link_up, link_down;
  std::int64_t daily_budget_bytes = 0;  // 0: unlimited
};

// Reads and validates cfg.uplink.policy (null: always). Problems at /uplink/policy/...
LinkPolicyConfig read_link_policy(const config::StationConfig& cfg, config::Problems& problems);
void validate_link_policy(const config::StationConfig& cfg, config::Problems& problems);

// The first planned connection start at or after `t` (scheduled mode), none
// for "always" or a schedule without times.
std::optional<std::int64_t> next_planned(const LinkPolicyConfig& p, std::int64_t t);

struct LinkView {
  std::int64_t now = 0;
  bool open = false;           // the daemon wants the link (set by the last open)
  bool up = false;             // the backend reports up
  std::int64_t opened_t = 0;   // when it was opened
  std::int64_t drained_t = 0;  // since when nothing was left to send (0: not drained)
  std::int64_t unsent = 0;     // packets the budget lets us send, in the outbox and queues
  std::int64_t unsent_alerts = 0;
  bool budget_left = true;
};

enum class LinkAction { none, open, close };

struct LinkDecision {
  LinkAction action = LinkAction::none;
  std::string reason;  // for the log: "schedule", "alert", "drained", ...
};

class LinkSchedule {
 public:
  // `now`: the start time; the first planned connection is the next one at or after it.
  LinkSchedule(LinkPolicyConfig cfg, std::int64_t now);
  LinkDecision decide(const LinkView& v);
  std::optional<std::int64_t> next_due() const { return next_due_; }
  const LinkPolicyConfig& config() const { return cfg_; }

 private:
  LinkPolicyConfig cfg_;
  std::optional<std::int64_t> next_due_;
};

// Usage per UTC day ("day bytes" text in the archive state).
struct DailyUsage {
  std::int64_t day = 0;  // days since the epoch (UTC)
  std::int64_t bytes = 0;
  void roll(std::int64_t now);  // a new UTC day starts at 0
  void add(std::int64_t now, std::int64_t n);
  std::string serialize() const;
  static DailyUsage parse(const std::string& text, std::int64_t now);
};

}  // namespace tarn::uplink
