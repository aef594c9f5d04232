// Logging for a person on SSH. One named logger per subsystem (an instrument's
// line, "uplink", "store", ...), all writing to stderr. Under systemd
// (JOURNAL_STREAM set) each line starts with the sd-daemon priority prefix
// <3>..<7> and carries no timestamp (journald adds its own); on a terminal,
// local time and colour.
#pragma once

#include <spdlog/spdlog.h>

#include <memory>
#include <string>

namespace tarn::os {

// Sets up the default logger and the pattern; call once at start.
// `level` is one of trace, debug, info, warn, error, critical, off.
void setup_logging(const std::string& level);
void set_log_level(const std::string& level);
// The logger for a subsystem, created on first use.
std::shared_ptr<spdlog::logger> logger(const std::string& name);
bool under_journal();

}  // namespace tarn::os
