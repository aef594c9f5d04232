// LinkControl: the uplink backend's life and the link policy
// (daemon/uplink/link_policy.h). Builds the backend from the config and
// wires its downlink to ShoreCommands; every 250 ms asks the policy whether
// to open or close the link (running the configured link_up / link_down
// commands), and persists the daily usage. A reload whose link settings and
// files are unchanged keeps the running backend (same_link()).
// Owns: the policy settings, the schedule, the command runner, whether the
// link is open, the fingerprint of the config the backend was built from,
// and the policy timer. The backend itself lives in StationContext (the
// drain, the packet queue and the status use it).
// Called by: Station (build, teardown, start, reload); OutboxDrain reads
// policy() for the budget; StatusReport reads the accessors.
// Thread-safety: io_context thread only.
#pragma once

#include <cstdint>
#include <memory>
#include <string>

#include "daemon/core/station_context.h"
#include "daemon/uplink/command_runner.h"
#include "daemon/uplink/link_policy.h"

namespace tarn::daemon {

class OutboxDrain;
class ShoreCommands;

class LinkControl {
 public:
  LinkControl(StationContext& ctx, OutboxDrain& drain, ShoreCommands& shore);

  // The backend, its command handler, the policy and schedule, from ctx.cfg.
  void build();
  // Stops and drops the backend (its packets in flight are forgotten).
  void drop();
  // Whether `next` builds the link the running backend was built from.
  bool same_link(const config::StationConfig& next) const;
  // Decides now and every 250 ms after.
  void tick();
  // After a reload that rebuilt the backend: connect it again if the link
  // was open (the link commands are not run again).
  void reconnect_if_open();

  bool is_open() const { return open_; }
  const uplink::LinkPolicyConfig& policy() const { return policy_; }
  std::optional<std::int64_t> next_due() const;
  const uplink::CommandRunner& runner() const { return runner_; }

 private:
  void open(const std::string& reason);
  void close(const std::string& reason);

  StationContext& ctx_;
  OutboxDrain& drain_;
  ShoreCommands& shore_;
  uplink::LinkPolicyConfig policy_;
  std::unique_ptr<uplink::LinkSchedule> schedule_;
  uplink::CommandRunner runner_;
  bool open_ = false;
  std::int64_t opened_t_ = 0, drained_t_ = 0;
  std::string last_note_;
  // link_fingerprint() of the config the running backend was built from
  // (its files as they were then): a reload compares the new config to it.
  std::string fingerprint_;
  os::Timer timer_;  // real time: the policy's next look (every 250 ms)
};

}  // namespace tarn::daemon
