#include "daemon/core/config_check.h"

#include "config/pipeline_config.h"
#include "daemon/core/health.h"
#include "daemon/core/maintenance_book.h"
#include "daemon/store/store_config.h"
#include "daemon/uplink/backend.h"
#include "daemon/uplink/downlink.h"
#include "daemon/uplink/link_policy.h"
#include "drivers/driver.h"

namespace tarn::daemon {

namespace {

config::LoadResult check_loaded(config::LoadResult res) {
  if (!res.config) return res;  // JSON syntax error
  config::StationConfig& cfg = *res.config;
  config::Problems& p = res.problems;
  drivers::check_instruments(cfg, p);  // keeps Instrument::settings
  config::check_pipeline(cfg, p);      // keeps Channel::pipeline, alert_rules
  uplink::validate_uplink(cfg, p);
  // Each owner's reading is its validation; what it read is kept, typed.
  cfg.settings.put(read_health_options(cfg, p));
  cfg.settings.put(read_maintenance_options(cfg, p));
  cfg.settings.put(uplink::read_link_policy(cfg, p));
  // The store block was read only when the store opened, its problems
  // discarded: now the check refuses a bad one (config/README.md).
  cfg.settings.put(store::read_store_config(&cfg.store, "/store", p));
  uplink::validate_downlink(cfg, p);
  if (!res.problems.empty()) res.config.reset();
  return res;
}

}  // namespace

config::LoadResult load_and_check(const std::string& path) {
  return check_loaded(config::load_file(path));
}

config::LoadResult load_and_check_text(const std::string& text, const std::string& file) {
  return check_loaded(config::load_text(text, file));
}

}  // namespace tarn::daemon
