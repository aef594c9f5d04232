// The "serial-radio" backend: packets over a transparent serial radio modem
// to a shore relay (`tarn relay`), in radio frames (codec/RADIO.md).
// Each data frame carries the outbox sequence; the relay answers with an ack
// frame for it once the broker has the packet. Unanswered frames are sent
// again after ack_timeout_ms, at most `retries` more times, then reported not
// acknowledged (the packet stays in the outbox). At most `window` (1..8)
// frames are in flight. The link is up while the relay answered recently and
// said it can reach its broker: pings go out when the line is idle.
// Options (uplink.options): port (required), baud, data_bits, parity,
// stop_bits, flow_control, mtu (radio MTU: wire bytes of one frame, 64..65536,
// default 255), ack_timeout_ms, retries, window, ping_interval_ms,
// link_timeout_ms, reopen_ms. Timers run in real time, not at --speed.
// Thread-safety: io_context thread only (see backend.h).
#pragma once

#include "daemon/uplink/backend.h"
#include "daemon/uplink/radio_port.h"

namespace tarn::uplink {

struct SerialRadioOptions {
  RadioPortOptions line;
  int ack_timeout_ms = 2000;
  int retries = 3;
  int window = 4;
  int ping_interval_ms = 10000;
  int link_timeout_ms = 0;  // 0: 3 * ping_interval_ms + ack_timeout_ms
  int reopen_ms = 5000;
};

SerialRadioOptions read_serial_radio_options(const config::StationConfig& cfg,
                                             config::Problems& problems);
BackendFactory serial_radio_backend_factory();

// The first byte of a data frame's payload (RADIO.md §5): the packet kind in
// bits 0-6 (0 window, 1 alert, 2 manifest, 3 health, 4 reply, 5 provisional),
// bit 7 set for a retained publish.
std::uint8_t route_byte(PacketKind kind, bool retained);
// False for a kind this build does not know.
bool parse_route_byte(std::uint8_t b, PacketKind& kind, bool& retained);

}  // namespace tarn::uplink
