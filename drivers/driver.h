// InstrumentDriver: the one interface between the bus scheduler and an
// instrument protocol. A driver is a file pair drivers/<name>_driver.{h,cpp}
// plus one line in drivers/driver_registry.cpp.
//
// A poll is a coroutine on the instrument's SerialPort: it may run several
// exchanges (SDI-12 measure then data), but only while the scheduler holds the
// line for it, so instruments sharing a line never talk over each other.
#pragma once

// First, in its own block: Boost 1.74's awaitable.hpp uses std::exchange without it.
#include <utility>

#include <boost/asio/awaitable.hpp>
#include <functional>
#include <memory>
#include <string>
#include <vector>

#include "config/problems.h"
#include "config/station_config.h"
#include "drivers/reading.h"
#include "drivers/serial_port.h"

namespace tarn::drivers {

// A record of one poll's raw traffic, for `tarn probe` and debug logs.
struct ExchangeLog {
  std::vector<std::pair<std::string, std::vector<std::uint8_t>>> entries;  // "tx"/"rx", bytes
  void add(std::string dir, std::vector<std::uint8_t> bytes) {
    entries.emplace_back(std::move(dir), std::move(bytes));
  }
};

class InstrumentDriver {
 public:
  virtual ~InstrumentDriver() = default;
  // Polls the instrument once. `log`, when given, records the raw exchange.
  // REQUIRES: the caller holds the line (one request at a time per line).
  virtual boost::asio::awaitable<PollResult> poll(SerialPort& port, ExchangeLog* log) = 0;
  // Extra facts for `tarn probe` (e.g. the SDI-12 identify reply).
  virtual boost::asio::awaitable<std::string> identify(SerialPort& port, ExchangeLog* log);
  // Binary protocols print bytes in hex in probe output.
  virtual bool binary() const { return false; }
};

struct DriverFactory {
  const char* name;
  const char* summary;
  // Reads and validates instrument.options and every channel's "source",
  // records problems with their JSON pointers, and keeps what it read, typed,
  // in instrument.settings (config/owner_settings.h) for create(). Never
  // opens anything.
  void (*check)(config::Instrument&, const config::Line&, config::Problems&);
  // REQUIRES: check() (through check_instruments()) ran on the instrument and
  // found no problems: the driver runs the settings check() kept, and throws
  // std::logic_error when there are none.
  std::unique_ptr<InstrumentDriver> (*create)(const config::Instrument&, const config::Line&);
};

const std::vector<DriverFactory>& driver_registry();
const DriverFactory* find_driver(const std::string& name);

// Reads and validates the driver-related parts of a whole config: driver
// names, options, channel sources, calibrations. Appends to `problems`, and
// keeps what it read in each Instrument::settings (the driver's options, the
// channels' calibrations: calibration_config.h). Called once, by the whole
// check (daemon/core/config_check.h).
void check_instruments(config::StationConfig& cfg, config::Problems& problems);
// The same checks on a copy (nothing kept).
void validate_instruments(const config::StationConfig& cfg, config::Problems& problems);

}  // namespace tarn::drivers
