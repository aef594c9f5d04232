#include "drivers/driver.h"

#include "drivers/calibration_config.h"
#include "drivers/line_driver.h"
#include "drivers/modbus_rtu_driver.h"
#include "drivers/sdi12_driver.h"

namespace tarn::drivers {

boost::asio::awaitable<std::string> InstrumentDriver::identify(SerialPort&, ExchangeLog*) {
  co_return std::string();
}

const std::vector<DriverFactory>& driver_registry() {
  // One line per driver.
  static const std::vector<DriverFactory> table = {
      line_driver_factory(),
      modbus_rtu_driver_factory(),
      sdi12_driver_factory(),
  };
  return table;
}

const DriverFactory* find_driver(const std::string& name) {
  for (auto& f : driver_registry())
    if (name == f.name) return &f;
  return nullptr;
}

void check_instruments(config::StationConfig& cfg, config::Problems& problems) {
  for (auto& in : cfg.instruments) {
    const DriverFactory* f = find_driver(in.driver);
    if (!f) {
      std::string list;
      for (auto& d : driver_registry()) list += std::string(list.empty() ? "" : ", ") + d.name;
      problems.add(in.pointer + "/driver", "is \"" + in.driver + "\"; allowed: " + list);
    } else if (const config::Line* line = cfg.find_line(in.line)) {
      f->check(in, *line, problems);
    }
    ChannelCalibrations cals;
    for (auto& ch : in.channels)
      cals.channels.push_back(
          read_calibration(ch.calibration, ch.pointer + "/calibration", problems));
    in.settings.put(std::move(cals));
  }
}

void validate_instruments(const config::StationConfig& cfg, config::Problems& problems) {
  config::StationConfig copy = cfg;
  check_instruments(copy, problems);
}

}  // namespace tarn::drivers
