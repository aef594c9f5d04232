// What a driver returns for one poll of one instrument: one reading per
// configured channel, in the channel order of the config, calibrated to
// physical units. A channel without a usable value says why.
#pragma once

#include <cstdint>
#include <optional>
#include <string>
#include <vector>

namespace tarn::drivers {

enum class ReadProblem : std::uint8_t {
  none = 0,
  no_reply,          // timed out after the retries
  garbled,           // unparsable reply, bad checksum / CRC, non-numeric field
  offline,           // the line's port is closed (unplugged, not yet reopened)
  instrument_error,  // the instrument reported an error (Modbus exception, status field)
  warming_up,        // within the warm-up time after (re)connection
  missed,            // the scheduler could not poll in time (line busy)
};

const char* to_string(ReadProblem p);

struct ChannelReading {
  std::optional<double> value;
  ReadProblem problem = ReadProblem::none;
};

struct PollResult {
  std::int64_t t_ms = 0;                 // the poll's scheduled time (UTC ms)
  std::vector<ChannelReading> channels;  // one per configured channel
  std::string error;                     // last problem in words, empty when fine
};

}  // namespace tarn::drivers
