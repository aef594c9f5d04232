// What a packet is: the one packet kind of the station. The outbox stores it
// (daemon/store/README.md: the `kind` column holds these numbers), the uplink
// backends route by it (MQTT topic suffix, the radio's route byte, spool file
// names). Pure values; no other header of ours.
#pragma once

#include <cstdint>

namespace tarn::codec {

// The numbers are stored in outbox.db; never renumber. reply and provisional
// never enter the outbox: the station sends them directly.
enum class PacketKind : std::uint8_t {
  window = 1,
  alert = 2,
  manifest = 3,
  health = 4,
  reply = 5,        // the answer to a downlink command
  provisional = 6,  // an unfinished window (routed as a window)
};

}  // namespace tarn::codec
