#include "daemon/uplink/downlink.h"

#include <fstream>

#include "drivers/os/logging.h"

namespace tarn::uplink {

Json DownlinkReply::to_json() const {
  Json j = {{"id", id}, {"result", accepted ? "accepted" : "refused"}, {"reason", reason}};
  if (!data.is_null()) j["data"] = data;
  return j;
}

DownlinkReceiver::DownlinkReceiver(std::string station, std::vector<std::uint8_t> key,
                                   std::int64_t window_s, const std::string& nonces)
    : station_(std::move(station)), key_(std::move(key)), window_s_(window_s) {
  if (!nonces.empty() && !nonces_.restore(nonces))
    os::logger("downlink")->warn("saved nonce cache unreadable; starting empty");
}

DownlinkReply DownlinkReceiver::handle(std::string_view payload, DownlinkTarget& target) {
  auto log = os::logger("downlink");
  DownlinkReply reply;
  auto refuse = [&](std::string why) {
    reply.accepted = false;
    reply.reason = std::move(why);
    refused_++;
    log->warn("command {} refused: {}", reply.id.empty() ? "(no id)" : reply.id, reply.reason);
    return reply;
  };
  config::ParsedCommand parsed = config::parse_command(payload);
  reply.id = parsed.id;
  if (!parsed.command) return refuse(parsed.reason);
  config::DownlinkCommand& c = *parsed.command;
  std::int64_t now = target.station_now();
  if (auto why = config::check_authentication(c, station_, key_, now, window_s_, nonces_);
      !why.empty())
    return refuse(why);
  if (!c.nonce.empty()) {
    if (!nonces_.add(c.nonce, c.t.value_or(now), now, window_s_))
      return refuse("too many commands in the time window; try again later");
    target.save_nonces(nonces_.serialize());
  }
  if (auto why = config::validate_arguments(c); !why.empty()) return refuse(why);
  std::string err;
  if (c.cmd == "ping") {
    reply.data = target.ping();
  } else if (c.cmd == "resend") {
    reply.data = Json::object();
    err = target.resend(c.resend, reply.data);
  } else if (c.cmd == "maintenance") {
    err = target.maintenance(c.maintenance, "downlink");
  } else if (c.cmd == "set") {
    err = target.set_setting(c.setting, c.value);
  }
  if (!err.empty()) {
    reply.data = nullptr;
    return refuse(err);
  }
  reply.accepted = true;
  accepted_++;
  log->info("command {} ({}) accepted", c.id, c.cmd);
  return reply;
}

std::vector<std::uint8_t> read_command_key(const config::StationConfig& cfg, config::Problems& p) {
  const std::string ptr = "/uplink/options/secrets_file";
  if (!cfg.uplink.options.is_object()) return {};
  auto it = cfg.uplink.options.find("secrets_file");
  if (it == cfg.uplink.options.end() || !it->is_string()) return {};
  std::string path = it->get<std::string>();
  std::ifstream in(path);
  if (!in) return {};  // the backend's validator reports a missing file
  config::Json j = config::Json::parse(in, nullptr, false, true);
  if (!j.is_object() || !j.contains("command_key")) return {};
  const auto& k = j["command_key"];
  auto bytes = k.is_string() ? config::from_hex(k.get<std::string>()) : std::nullopt;
  if (!bytes || bytes->size() < 16) {
    p.add(ptr, "in secrets file \"" + path +
                   "\": /command_key: is not allowed; allowed: a hex string of at least 32 digits "
                   "(16 bytes; 64 digits recommended)");
    return {};
  }
  return *bytes;
}

void validate_downlink(const config::StationConfig& cfg, config::Problems& p) {
  read_command_key(cfg, p);
}

}  // namespace tarn::uplink
