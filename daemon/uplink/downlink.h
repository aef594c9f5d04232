// DownlinkReceiver: takes one command payload from the shore, checks it
// (config/downlink_command.h: envelope, authentication, arguments) and, only
// when every check passed, runs it on a DownlinkTarget (the station's is
// daemon/core/shore_commands.h). Returns the reply for the reply topic:
// {"id", "result": "accepted"|"refused", "reason", "data"?}. A refused
// command changes nothing (the nonce of an authentic command is recorded
// even when its arguments are refused, so the same bytes cannot be tried
// twice). Format: daemon/uplink/DOWNLINK.md.
// Thread-safety: io_context thread only.
#pragma once

#include <cstdint>
#include <string>
#include <string_view>
#include <vector>

#include <nlohmann/json.hpp>

#include "config/downlink_command.h"
#include "config/station_config.h"

namespace tarn::uplink {

using Json = nlohmann::json;

// What a command acts on. Each returns an error in words, empty on success.
class DownlinkTarget {
 public:
  virtual ~DownlinkTarget() = default;
  virtual std::int64_t station_now() const = 0;
  virtual Json ping() = 0;
  virtual std::string resend(const config::ResendArgs& a, Json& data) = 0;
  // `via`: who asked ("control socket", "downlink"), for the log.
  virtual std::string maintenance(const config::MaintenanceArgs& a, const std::string& via) = 0;
  // Validates the override like the config; applies and persists it only if valid.
  virtual std::string set_setting(const std::string& pointer, const Json& value) = 0;
  virtual void save_nonces(const std::string& serialized) = 0;
};

struct DownlinkReply {
  std::string id;
  bool accepted = false;
  std::string reason;
  Json data;  // null: none
  Json to_json() const;
};

class DownlinkReceiver {
 public:
  // `key` empty: unsigned commands accepted. `nonces`: the persisted cache text (may be empty).
  DownlinkReceiver(std::string station, std::vector<std::uint8_t> key, std::int64_t window_s,
                   const std::string& nonces);
  DownlinkReply handle(std::string_view payload, DownlinkTarget& target);
  bool signed_only() const { return !key_.empty(); }
  std::uint64_t accepted() const { return accepted_; }
  std::uint64_t refused() const { return refused_; }
  // Carries the counts over when the receiver is rebuilt (config reload).
  void carry_counts(const DownlinkReceiver& old) {
    accepted_ = old.accepted_;
    refused_ = old.refused_;
  }

 private:
  std::string station_;
  std::vector<std::uint8_t> key_;
  std::int64_t window_s_;
  config::NonceCache nonces_;
  std::uint64_t accepted_ = 0, refused_ = 0;
};

// The downlink HMAC key: "command_key" (hex, at least 32 digits) in the file
// named by uplink.options.secrets_file. Empty when none is configured.
// Problems at /uplink/options/secrets_file.
std::vector<std::uint8_t> read_command_key(const config::StationConfig& cfg,
                                           config::Problems& problems);
void validate_downlink(const config::StationConfig& cfg, config::Problems& problems);

}  // namespace tarn::uplink
