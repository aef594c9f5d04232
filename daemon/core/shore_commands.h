// ShoreCommands: the downlink (daemon/uplink/DOWNLINK.md). Takes each command
// payload the uplink receives, has the DownlinkReceiver check it and run it
// here (this is its DownlinkTarget), and queues the reply for the drain.
// Runs ping, resend (sent packets again from the outbox, or windows rebuilt
// from the archive), maintenance (through MaintenanceControl) and set
// (setting overrides: kept in the archive state "overrides", applied onto
// the config file's JSON at start, at each reload and at each set; a set's
// new config is applied once its reply went out).
// Owns: the DownlinkReceiver (its nonce cache persisted in the archive state
// "downlink_nonces"), the overrides and the config a set is waiting to apply.
// Called by: LinkControl's backend (on_command), OutboxDrain (a reply went
// out), Station (start, reload); StatusReport reads the accessors.
// Thread-safety: io_context thread only; the backend posts commands there.
#pragma once

#include <cstdint>
#include <functional>
#include <memory>
#include <optional>
#include <string>
#include <vector>

#include "config/station_config.h"
#include "daemon/core/station_context.h"
#include "daemon/uplink/downlink.h"

namespace tarn::daemon {

class SampleIntake;
class PacketQueue;
class OutboxDrain;
class MaintenanceControl;

class ShoreCommands final : public uplink::DownlinkTarget {
 public:
  // apply_config: applies a validated config (Station's reload without
  // overrides added again).
  ShoreCommands(StationContext& ctx, SampleIntake& intake, PacketQueue& packets, OutboxDrain& drain,
                MaintenanceControl& maintenance,
                std::function<void(config::StationConfig)> apply_config);

  // At start: reads the persisted overrides and applies them to ctx.cfg.
  void load_overrides();
  // At a reload: the overrides applied onto the new config (logged if they
  // no longer apply; the config is then used as it is).
  void add_overrides(config::StationConfig& cfg) const;
  // A new receiver for ctx.cfg's key (counts carried over).
  void make_downlink();
  void on_command(const std::vector<std::uint8_t>& payload);
  // Applies the config a set left waiting (posted: not inside the backend).
  void apply_pending_config();

  // DownlinkTarget (io_context thread).
  std::int64_t station_now() const override { return ctx_.now_s(); }
  Json ping() override;
  std::string resend(const config::ResendArgs& a, Json& data) override;
  std::string maintenance(const config::MaintenanceArgs& a, const std::string& via) override;
  std::string set_setting(const std::string& pointer, const Json& value) override;
  void save_nonces(const std::string& serialized) override;

  const Json& overrides() const { return overrides_; }
  const uplink::DownlinkReceiver* receiver() const { return downlink_.get(); }

 private:
  std::string resend_from_archive(std::int64_t from, std::int64_t to, Json& data);

  StationContext& ctx_;
  SampleIntake& intake_;
  PacketQueue& packets_;
  OutboxDrain& drain_;
  MaintenanceControl& maintenance_;
  std::function<void(config::StationConfig)> apply_config_;
  std::unique_ptr<uplink::DownlinkReceiver> downlink_;
  Json overrides_ = Json::object();
  std::optional<config::StationConfig> pending_config_;
};

}  // namespace tarn::daemon
