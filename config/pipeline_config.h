// Maps the QC, window and alert blocks of the station config to the pipeline's
// settings types (config/settings/, a leaf below config), with validation that
// names JSON pointers. The pipeline (daemon/pipeline/) runs what is read here.
//
// Per channel:   "qc": [ {"kind": "gross_range", ...}, ... ]   (ordered)
//                "window": {"include_suspect": false, "median": false, ...}  (optional)
// Station-wide:  "alerts": {"rules": [ {...}, ... ]}
#pragma once

#include <vector>

#include "config/problems.h"
#include "config/settings/alert_settings.h"
#include "config/settings/channel_settings.h"
#include "config/station_config.h"

namespace tarn::config {

// The pipeline config of one channel: QC tests from ch.qc, window settings
// from the station's sampling block and ch.window, poll interval from the
// instrument's period, location from the station.
pipeline::ChannelConfig read_channel_pipeline(const StationConfig& cfg, const Instrument& in,
                                              const Channel& ch, Problems& problems);
// The alert rules of cfg.alerts (empty when absent).
std::vector<pipeline::AlertRule> read_alert_rules(const StationConfig& cfg, Problems& problems);
// Reads and validates every channel's pipeline blocks and the alert rules, and
// keeps what it read: each Channel::pipeline and StationConfig::alert_rules.
// Called once, by the whole check (daemon/core/config_check.h).
void check_pipeline(StationConfig& cfg, Problems& problems);
// The same checks on a copy (nothing kept): for tests and tools.
void validate_pipeline(const StationConfig& cfg, Problems& problems);

}  // namespace tarn::config
