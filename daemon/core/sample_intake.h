// SampleIntake: takes the pipeline's output (AssemblerOutput: flagged
// samples, closed windows, alert events, cleaning steps) and sends each on:
// samples to the archive (one transaction per poll cycle), windows, alerts
// and cleanings to the PacketQueue, then the pipeline's state to the archive
// and the drain going. At start and after a reload that changed the pipeline
// it replays the archive's samples since the last saved state, so the open
// window resumes where it was.
// Owns: the samples of this poll cycle not yet written, and per channel the
// newest sample the last replay read from the archive (not archived twice).
// Called by: BusLines (each poll), Station (tick, reload, stop), ShoreCommands
// (flush before rebuilding windows from the archive).
// Thread-safety: io_context thread only.
#pragma once

#include <cstdint>
#include <vector>

#include "daemon/core/station_context.h"

namespace tarn::daemon {

class PacketQueue;
class OutboxDrain;

class SampleIntake {
 public:
  SampleIntake(StationContext& ctx, PacketQueue& packets, OutboxDrain& drain)
      : ctx_(ctx), packets_(packets), drain_(drain) {}

  // Sends `out` on and clears it.
  void handle(AssemblerOutput& out);
  // Writes the waiting samples to the archive now.
  void flush_archive();
  // Restores the pipeline's saved state and replays the archive after it.
  void resume_from_archive();

 private:
  StationContext& ctx_;
  PacketQueue& packets_;
  OutboxDrain& drain_;
  std::vector<store::ArchivedSample> pending_archive_;  // this poll cycle's, not yet written
  // Per channel, the newest sample the last replay read from the archive: the
  // pipeline emits those again (a sample held for the spike test's
  // look-ahead), and the archive must not get them twice.
  std::vector<std::int64_t> archived_until_;
};

}  // namespace tarn::daemon
