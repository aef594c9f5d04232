// The systemd notify protocol (sd_notify(3)): READY=1, STATUS=, WATCHDOG=1,
// STOPPING=1. Does nothing when not started by systemd (NOTIFY_SOCKET unset).
#pragma once

#include <chrono>
#include <string>

namespace tarn::daemon {

void notify_ready(const std::string& status);
void notify_status(const std::string& status);
void notify_watchdog();
void notify_stopping();
// The watchdog interval systemd asked for (WATCHDOG_USEC), or zero.
std::chrono::microseconds watchdog_interval();

}  // namespace tarn::daemon
