#include "drivers/calibration_config.h"

#include "config/json_reader.h"

namespace tarn::drivers {

using config::Need;
using config::ObjectReader;

void validate_calibration(const config::Channel& ch, config::Problems& problems) {
  if (ch.calibration.is_null()) return;
  ObjectReader r(ch.calibration, ch.pointer + "/calibration", problems);
  std::string kind;
  r.one_of("kind", kind, {"linear"}, Need::required);
  double d = 0;
  r.number("gain", d, -1e12, 1e12);
  r.number("offset", d, -1e12, 1e12);
  r.finish();
}

CalibrationFn make_calibration(const config::Channel& ch) {
  if (ch.calibration.is_null()) return [](double x) { return std::optional<double>(x); };
  double gain = ch.calibration.value("gain", 1.0);
  double offset = ch.calibration.value("offset", 0.0);
  return [gain, offset](double x) { return std::optional<double>(gain * x + offset); };
}

}  // namespace tarn::drivers
