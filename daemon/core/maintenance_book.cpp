#include "daemon/core/maintenance_book.h"

#include <algorithm>

namespace tarn::daemon {

MaintenanceOptions read_maintenance_options(const config::StationConfig& cfg, config::Problems& p) {
  MaintenanceOptions o;
  if (cfg.maintenance.is_null()) return o;
  config::ObjectReader r(cfg.maintenance, "/maintenance", p);
  r.integer("max_duration_s", o.max_duration_s, kMaintenanceMaxDurationMinS,
            kMaintenanceMaxDurationMaxS);
  r.finish();
  return o;
}

std::string maintenance_scope_name(const std::string& instrument) {
  return instrument.empty() ? "the whole station" : "instrument " + instrument;
}

std::string MaintenanceBook::check(const config::MaintenanceArgs& a,
                                   const std::vector<std::string>& instruments) const {
  const std::string& in = a.instrument;
  if (!in.empty() && std::find(instruments.begin(), instruments.end(), in) == instruments.end()) {
    std::string list;
    for (auto& n : instruments) list += (list.empty() ? "" : ", ") + n;
    return "unknown instrument \"" + in + "\"; allowed: one of the configured instruments (" +
           list + ")";
  }
  if (a.start) {
    if (open_.count(in))
      return "maintenance of " + maintenance_scope_name(in) + " is already active";
    if (!in.empty() && open_.count(""))
      return "the whole station is in maintenance already, which covers instrument " + in +
             "; allowed: stop it first, or start without --instrument";
    return {};
  }
  if (in.empty()) return open_.empty() ? "no maintenance period is active" : std::string();
  if (!open_.count(in))
    return "instrument " + in + " has no maintenance period of its own" +
           (open_.count("") ? "; the whole station's period covers it (stop without --instrument)"
                            : "");
  return {};
}

MaintenanceEntry& MaintenanceBook::start(const config::MaintenanceArgs& a, std::int64_t t,
                                         std::int64_t max_s) {
  MaintenanceEntry e;
  e.instrument = a.instrument;
  e.start_t = t;
  e.until_t = t + max_s;
  e.note = a.note;
  return open_[a.instrument] = std::move(e);
}

std::vector<MaintenanceEntry> MaintenanceBook::end_if(
    std::int64_t t, const std::string& by, bool at_until,
    const std::function<bool(const MaintenanceEntry&)>& pred) {
  std::vector<MaintenanceEntry> out;
  for (auto it = open_.begin(); it != open_.end();) {
    if (!pred(it->second)) {
      ++it;
      continue;
    }
    MaintenanceEntry e = std::move(it->second);
    it = open_.erase(it);
    e.end_t = std::max(e.start_t, at_until ? std::min(t, e.until_t) : t);
    e.ended_by = by;
    out.push_back(e);
  }
  // The newest end is the one the status shows ("last ...").
  for (auto& e : out)
    if (!last_ended_ || *e.end_t >= *last_ended_->end_t) last_ended_ = e;
  return out;
}

std::vector<MaintenanceEntry> MaintenanceBook::stop(const std::string& instrument, std::int64_t t) {
  return end_if(t, "stop", false, [&](const MaintenanceEntry& e) {
    return instrument.empty() || e.instrument == instrument;
  });
}

std::vector<MaintenanceEntry> MaintenanceBook::expire(std::int64_t now, bool at_until) {
  return end_if(now, "time_limit", at_until,
                [&](const MaintenanceEntry& e) { return e.until_t <= now; });
}

std::vector<MaintenanceEntry> MaintenanceBook::drop_unknown(
    const std::vector<std::string>& instruments, std::int64_t t) {
  return end_if(t, "config", false, [&](const MaintenanceEntry& e) {
    return !e.instrument.empty() &&
           std::find(instruments.begin(), instruments.end(), e.instrument) == instruments.end();
  });
}

void MaintenanceBook::restore(MaintenanceEntry e) {
  std::string key = e.instrument;
  open_[key] = std::move(e);
}

std::optional<std::int64_t> MaintenanceBook::next_until() const {
  std::optional<std::int64_t> n;
  for (auto& [k, e] : open_)
    if (!n || e.until_t < *n) n = e.until_t;
  return n;
}

}  // namespace tarn::daemon
