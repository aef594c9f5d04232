#include "daemon/core/config_check.h"

#include "config/pipeline_config.h"
#include "daemon/core/health.h"
#include "daemon/core/maintenance_book.h"
#include "daemon/uplink/backend.h"
#include "daemon/uplink/downlink.h"
#include "daemon/uplink/link_policy.h"
#include "drivers/driver.h"

namespace tarn::daemon {

namespace {

config::LoadResult check_loaded(config::LoadResult res) {
  if (!res.config) return res;  // JSON syntax error
  drivers::validate_instruments(*res.config, res.problems);
  config::validate_pipeline(*res.config, res.problems);
  uplink::validate_uplink(*res.config, res.problems);
  read_health_options(*res.config, res.problems);
  read_maintenance_options(*res.config, res.problems);
  uplink::validate_link_policy(*res.config, res.problems);
  uplink::validate_downlink(*res.config, res.problems);
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
