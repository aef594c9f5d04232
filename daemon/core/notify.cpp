#include "daemon/core/notify.h"

#include <systemd/sd-daemon.h>

namespace tarn::daemon {

void notify_ready(const std::string& status) {
  sd_notify(0, ("READY=1\nSTATUS=" + status).c_str());
}
void notify_status(const std::string& status) {
  sd_notify(0, ("STATUS=" + status).c_str());
}
void notify_watchdog() {
  sd_notify(0, "WATCHDOG=1");
}
void notify_stopping() {
  sd_notify(0, "STOPPING=1\nSTATUS=stopping");
}

std::chrono::microseconds watchdog_interval() {
  uint64_t usec = 0;
  if (sd_watchdog_enabled(0, &usec) > 0) return std::chrono::microseconds(usec);
  return std::chrono::microseconds(0);
}

}  // namespace tarn::daemon
