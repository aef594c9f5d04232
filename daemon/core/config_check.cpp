#include "daemon/core/config_check.h"

#include "config/pipeline_config.h"
#include "daemon/uplink/backend.h"
#include "drivers/driver.h"

namespace tarn::daemon {

config::LoadResult load_and_check(const std::string& path) {
  config::LoadResult res = config::load_file(path);
  if (!res.config) return res;  // JSON syntax error
  drivers::validate_instruments(*res.config, res.problems);
  config::validate_pipeline(*res.config, res.problems);
  uplink::validate_uplink(*res.config, res.problems);
  if (!res.problems.empty()) res.config.reset();
  return res;
}

}  // namespace tarn::daemon
