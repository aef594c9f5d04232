#include "daemon/core/health.h"

#include <sstream>

#include "config/json_reader.h"

namespace tarn::daemon {

using config::ObjectReader;

HealthOptions read_health_options(const config::StationConfig& cfg, config::Problems& p) {
  HealthOptions o;
  if (cfg.health.is_null()) return o;
  ObjectReader r(cfg.health, "/health", p);
  r.integer("interval_s", o.interval_s, 60, 86400);
  r.string("board_temp_file", o.board_temp_file);
  if (r.string("supply_file", o.supply_file) && o.supply_file.front() != '/')
    p.add("/health/supply_file", "is relative; allowed: an absolute path (sysfs or hwmon file)");
  r.number("supply_scale", o.supply_scale, 1e-9, 1e6);
  if (r.string("supply_channel", o.supply_channel)) {
    bool found = false;
    for (auto& in : cfg.instruments)
      for (auto& ch : in.channels) found |= ch.name == o.supply_channel;
    if (!found)
      p.add("/health/supply_channel", "names channel \"" + o.supply_channel +
                                          "\", which is not defined; allowed: a channel name");
  }
  r.one_of("clock_sync", o.clock_sync, {"kernel", "assume_synchronised"});
  if (!o.supply_file.empty() && !o.supply_channel.empty())
    p.add("/health", "has both supply_file and supply_channel; allowed: one of them");
  r.finish();
  return o;
}

const char* to_string(ClockSync s) {
  switch (s) {
    case ClockSync::synchronised:
      return "synchronised";
    case ClockSync::unsynchronised:
      return "not synchronised";
    case ClockSync::unknown:
      return "unknown";
  }
  return "unknown";
}

ClockSync kernel_clock_sync(os::Env& env) {
  return env.clock_sync();
}

static std::optional<double> read_number(os::Env& env, const std::string& path) {
  if (path.empty()) return std::nullopt;
  auto text = env.read_file(path);
  if (!text) return std::nullopt;
  std::istringstream in(*text);
  double v = 0;
  if (in >> v) return v;
  return std::nullopt;
}

HealthReading read_health(os::Env& env, const HealthOptions& o, const std::string& state_dir) {
  HealthReading h;
  h.board_temp_c = env.cpu_temp_c(o.board_temp_file);
  if (auto d = env.disk_space(state_dir)) {
    h.disk_free_mib = d->free_bytes / (1024 * 1024);
    h.disk_total_mib = d->total_bytes / (1024 * 1024);
  }
  h.load1 = env.load1();
  h.uptime_s = env.uptime_s();
  if (auto v = read_number(env, o.supply_file)) h.supply_v = *v * o.supply_scale;
  h.clock = kernel_clock_sync(env);
  return h;
}

nlohmann::json HealthReading::to_json() const {
  nlohmann::json j;
  auto put = [&](const char* k, auto& v) {
    if (v)
      j[k] = *v;
    else
      j[k] = nullptr;
  };
  put("board_temp_c", board_temp_c);
  put("disk_free_mib", disk_free_mib);
  put("disk_total_mib", disk_total_mib);
  put("load1", load1);
  put("uptime_s", uptime_s);
  put("supply_v", supply_v);
  j["clock"] = to_string(clock);
  j["boot_count"] = boot_count;
  return j;
}

}  // namespace tarn::daemon
