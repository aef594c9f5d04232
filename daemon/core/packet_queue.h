// PacketQueue: encodes what the station sends (closed windows, alert events,
// cleaning steps, the channel manifest, health records) into packets and
// inserts them into the store's outbox with their priority and kind. Windows
// and the manifest are split to the link's MTU; each part is encoded again
// with the sequence number the outbox assigns it.
// Owns: the counts of windows closed and alert events raised.
// Called by: SampleIntake (windows, alerts, cleanings), ShoreCommands
// (windows rebuilt for a resend), HealthReporter (health), Station (the
// manifest at start and reload); StatusReport reads the counts.
// Thread-safety: io_context thread only.
#pragma once

#include <cstddef>
#include <cstdint>
#include <vector>

#include "codec/packet.h"
#include "daemon/core/station_context.h"
#include "daemon/pipeline/alert_rules.h"

namespace tarn::daemon {

class PacketQueue {
 public:
  explicit PacketQueue(StationContext& ctx) : ctx_(ctx) {}

  // rebuilt: a window rebuilt from the archive for a resend (not counted as closed).
  void window(const codec::Window& w, bool rebuilt = false);
  void alerts(const std::vector<pipeline::AlertEvent>& events);
  void cleanings(const std::vector<codec::CleaningRecord>& records);
  void health(const codec::HealthRecord& rec, bool clock_unsynced);
  // The manifest, when its hash differs from the one last queued (archive state).
  void manifest_if_changed();
  std::size_t packet_mtu() const;  // the uplink's, at most the codec's largest packet

  std::uint64_t windows_closed() const { return windows_closed_; }
  std::uint64_t alerts_raised() const { return alerts_raised_; }

 private:
  StationContext& ctx_;
  std::uint64_t windows_closed_ = 0, alerts_raised_ = 0;
};

}  // namespace tarn::daemon
