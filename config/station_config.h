// The station config model: one JSON file (comments allowed), loaded and
// validated in one pass. Blocks that belong to a driver, a QC test list, a
// calibration or an uplink backend are kept as JSON with their pointer here
// and validated by their owner (see daemon/core/config_check.h), so adding a
// driver or backend never touches this file.
//
// Parsed once: each validator returns typed settings, kept here beside the
// raw blocks: the pipeline's (Channel::pipeline, StationConfig::alert_rules,
// filled by config/pipeline_config.h's check_pipeline) and those of the
// owners above config (StationConfig::settings, OwnerSettings; filled by
// daemon/core/config_check.h). The code that runs takes the typed settings;
// the raw blocks remain for fingerprints (what changed on a reload) and for
// the readers that still run inside the check.
#pragma once

#include <cstdint>
#include <optional>
#include <string>
#include <vector>

#include <nlohmann/json.hpp>

#include "config/owner_settings.h"
#include "config/problems.h"
#include "config/settings/alert_settings.h"
#include "config/settings/channel_settings.h"

namespace tarn::config {

using Json = nlohmann::json;

struct Station {
  std::string id;    // [a-z0-9-]{1,32}; used in MQTT topics and packets
  std::string name;  // free text
  double latitude = 0;
  double longitude = 0;
  std::optional<double> elevation_m;  // metres above sea level, when known
};

struct Sampling {
  int period_s = 60;   // default: common practice in lake monitoring, no source
  int window_s = 600;  // default: common practice in lake monitoring, no source
};

struct UsbIdentity {
  std::string vendor_id;   // 4 hex digits
  std::string product_id;  // 4 hex digits
  std::string serial;      // optional
};

struct Line {
  std::string name;
  std::string port;                // device path (may be a /dev/serial/by-id link)
  std::optional<UsbIdentity> usb;  // alternative to port
  int baud = 9600;
  int data_bits = 8;
  std::string parity = "none";  // none | even | odd
  int stop_bits = 1;
  std::string flow_control = "none";  // none | rts_cts | xon_xoff
  bool rs485_kernel_mode = false;     // TIOCSRS485 for on-board UARTs
  int gap_ms = 20;                    // inter-frame gap between requests on the line
  int timeout_ms = 1000;              // per request
  int retries = 1;                    // per request, bounded
  std::string pointer;                // "/lines/N"
};

struct Channel {
  std::string name;
  std::string quantity;
  std::string unit;          // UCUM code
  double resolution = 0.01;  // quantisation step for the wire format
  Json source;               // driver-specific addressing (field, register, index)
  Json calibration;          // null or object; see drivers/calibration_config.h
  // Raw blocks, kept only for the reload fingerprint (station.cpp hashes them);
  // what runs is the typed `pipeline` below.
  Json qc;      // null or array; see config/pipeline_config.h
  Json window;  // null or object; see config/pipeline_config.h
  // Typed: this channel's QC tests and window settings as the check read
  // them from qc, window, the sampling block, the instrument's period and the
  // alert rules (alert masks). Filled by check_pipeline(); empty before.
  pipeline::ChannelConfig pipeline;
  // Vertical position of the sensor, metres, positive down: depth_m as given, or minus
  // height_m (a sensor above the water surface). Empty when the config gives neither.
  std::optional<double> depth_m;
  std::string pointer;  // "/instruments/N/channels/M"
};

struct Instrument {
  std::string name;
  std::string line;    // name of a Line
  std::string driver;  // registry name: line | modbus-rtu | sdi12
  int warmup_s = 0;
  int period_s = 0;  // 0: the station's sampling period
  Json options;      // driver-specific, validated by the driver
  // Provenance carried in the manifest (codec/FORMAT.md §5.1); empty when not known.
  std::string model;          // instrument model, free text, <= 255 bytes
  std::string serial;         // serial number, free text, <= 255 bytes
  std::string calibrated_on;  // date of the last calibration, YYYY-MM-DD
  std::vector<Channel> channels;
  std::string pointer;  // "/instruments/N"
  // Typed: what the driver read from `options` and the channels' `source`
  // and `calibration` blocks in the check (drivers::check_instruments);
  // the driver runs these (drivers/driver.h).
  OwnerSettings settings;
};

struct Uplink {
  std::string backend = "mqtt";  // registry name
  Json options;                  // backend-specific
  // Raw, kept for the link fingerprint; what runs is
  // StationConfig::settings.get<uplink::LinkPolicyConfig>().
  Json policy;  // link policy block
  std::string pointer = "/uplink";
};

struct Paths {
  std::string state_dir = "/var/lib/tarn";
  std::string runtime_dir = "/run/tarn";
};

struct StationConfig {
  std::string file;  // where it was loaded from
  Station station;
  Sampling sampling;
  std::string log_level = "info";
  Paths paths;
  std::vector<Line> lines;
  std::vector<Instrument> instruments;
  Uplink uplink;
  // Raw, kept for the reload fingerprint; what runs is `alert_rules` below.
  Json alerts;  // null or object; see config/pipeline_config.h
  // Raw, kept for the reload's comparison (the store applies its block at the
  // next start); what runs is settings.get<store::StationStoreOptions>().
  Json store;  // null or object; see daemon/store/store_config.h
  // Raw; what runs is settings.get<daemon::HealthOptions>().
  Json health;  // null or object; see daemon/core/health.h
  // Raw; what runs is settings.get<daemon::MaintenanceOptions>().
  Json maintenance;  // null or object; see daemon/core/maintenance_book.h

  // Typed: the alert rules as the check read them from `alerts` (empty when
  // absent). Filled by check_pipeline().
  std::vector<pipeline::AlertRule> alert_rules;
  // Typed: the settings the owners above config read from their blocks in
  // the check (daemon/core/config_check.cpp lists them).
  OwnerSettings settings;

  const Line* find_line(const std::string& name) const;
  const Instrument* find_instrument(const std::string& name) const;
};

struct LoadResult {
  // Set whenever the JSON parsed, even with problems: callers must check
  // problems.empty() before using it (load_and_check() resets it on problems).
  std::optional<StationConfig> config;
  Problems problems;
};

// Parses and validates the core of the config (everything this file models).
// Never opens a port or socket. A JSON syntax error gives one problem at
// "line L:column C".
LoadResult load_file(const std::string& path);
LoadResult load_text(const std::string& text, const std::string& file);

// Checks that `path` names an existing readable regular file; records a
// problem at `pointer` otherwise. Used for TLS, secrets and similar paths.
bool check_readable_file(const std::string& path, const std::string& pointer, Problems& problems);

// UCUM unit codes accepted for channels.
const std::vector<std::string>& known_units();
// Quantity names accepted for channels.
const std::vector<std::string>& known_quantities();

}  // namespace tarn::config
