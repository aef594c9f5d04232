// SDI-12 (v1.4) commands and replies, as seen through a transparent SDI-12
// serial adapter (1200 baud, 7 data bits, even parity, 1 stop bit).
// Source for formats: SDI-12 Support Group, "SDI-12 A Serial-Digital Interface
// Standard for Microprocessor-Based Sensors", version 1.4 (sections 4.4 and 7).
// Section numbers and timing figures below are from memory of that text.
//
// How a driver uses it:
//   - commands: identify('0') == "0I!", start_measurement('0', {.crc = true}) ==
//     "0MC!", send_data('0', 0) == "0D0!". Send after a break when the line has
//     been idle (see RetryPolicy), read one reply line (LineSplitter strips CR LF).
//   - parse_measurement_reply(line, '0', Measure::standard) -> seconds to wait and
//     the number of values; then wait for the service request
//     (parse_address_reply(line) == '0') or the announced seconds, whichever is
//     first, and run a DataCollector to issue aD0!, aD1!, ... until it is done.
//   - with the CRC variants, every data reply's CRC is verified before any value
//     is returned (crc_mismatch otherwise).
// Parsers take one reply with or without its trailing <CR><LF>; any other CR or
// LF, or a byte outside printable ASCII, makes the reply invalid.
// Thread-safety: free functions are pure; DataCollector is a plain value type.
#pragma once

#include <array>
#include <chrono>
#include <cstddef>
#include <cstdint>
#include <optional>
#include <string>
#include <string_view>
#include <vector>

#include "codec/result.h"

namespace tarn::protocol::sdi12 {

// '0'..'9' (standard) and 'a'..'z', 'A'..'Z' (extended addresses since v1.3).
bool is_valid_address(char a);

// ---- commands (REQUIRES: valid addresses and indices, else std::invalid_argument) ----

std::string acknowledge_active(char address);    // "a!"
std::string address_query();                     // "?!" (only one sensor on the bus)
std::string identify(char address);              // "aI!"
std::string change_address(char from, char to);  // "aAb!"

enum class Measure {
  standard,    // aM!  : reply atttn, service request when ready
  concurrent,  // aC!  : reply atttnn, no service request
};
struct MeasureOptions {
  Measure kind = Measure::standard;
  bool crc = false;    // aMC! / aCC!: data replies carry a CRC
  unsigned index = 0;  // 0 for aM!, 1..9 for the additional aM1!..aM9!
};
std::string start_measurement(char address, const MeasureOptions& opt = {});
std::string send_data(char address, unsigned index);  // "aD0!".."aD9!", REQUIRES index <= 9

// ---- replies ----

enum class ReplyError {
  empty,
  bad_character,    // CR/LF inside, or a byte outside printable ASCII
  bad_address,      // first character is not an SDI-12 address
  wrong_address,    // a valid address, but not the one asked
  bad_length,       // too short or too long for this reply
  bad_field,        // non-digit where digits are required
  bad_value,        // a data value that is not <sign><up to 7 digits, one optional '.'>
  too_many_values,  // more values than the measurement announced
  crc_mismatch,
};
std::string_view to_string(ReplyError e);

// Reply to a!, ?!, aAb! and the service request after aM!: just "a".
Result<char, ReplyError> parse_address_reply(std::string_view line);

// aI! reply: a ll cccccccc mmmmmm vvv xxx..x (v1.4 §4.4.2).
struct Identification {
  char address = '0';
  std::string sdi12_version;   // 2 chars, "14" is version 1.4
  std::string vendor;          // 8 chars, as sent (may have trailing spaces)
  std::string model;           // 6 chars
  std::string sensor_version;  // 3 chars
  std::string serial;          // optional, 0..13 chars
};
Result<Identification, ReplyError> parse_identify(std::string_view line, char expected_address);

// aM!/aMC! reply "atttn" or aC!/aCC! reply "atttnn".
struct MeasurementAnnounce {
  char address = '0';
  unsigned seconds = 0;  // ttt: when the values will be ready
  unsigned count = 0;    // n or nn: number of values
};
Result<MeasurementAnnounce, ReplyError> parse_measurement_reply(std::string_view line,
                                                                char expected_address,
                                                                Measure kind);

// aDn! reply: address followed by values such as "+3.14-2.718"; with crc the
// last three characters are the CRC and are verified first.
struct DataReply {
  char address = '0';
  std::vector<double> values;
};
Result<DataReply, ReplyError> parse_data_reply(std::string_view line, char expected_address,
                                               bool crc);

// ---- CRC (v1.4 §4.4.12, from memory) ----
// CRC-16/ARC over the reply from the address up to the last value character,
// sent as three characters: 0x40 | bits 15..12, 0x40 | bits 11..6, 0x40 | bits 5..0.
std::array<char, 3> encode_crc(std::uint16_t crc);
std::uint16_t crc_of(std::string_view text);
// True when `line` (without CR LF) ends in the three CRC characters of the rest.
bool crc_matches(std::string_view line);

// ---- measurement sequence ----

// Collects the values of one measurement over aD0!..aD9!.
// Usage: DataCollector c('0', announce.count, crc);
//        while (auto cmd = c.next_command()) { send(*cmd); c.accept(read_line()); }
//        then c.state(): complete (all values), short_of_values, failed.
class DataCollector {
 public:
  enum class State { collecting, complete, short_of_values, failed };

  DataCollector(char address, unsigned expected_values, bool crc);

  // The next aDn! to send, or nothing when done.
  std::optional<std::string> next_command() const;
  // The reply to the command last returned by next_command().
  // A bad reply ends the collection in state failed and returns its error.
  Result<State, ReplyError> accept(std::string_view line);

  State state() const { return state_; }
  const std::vector<double>& values() const { return values_; }

 private:
  char address_;
  unsigned expected_;
  bool crc_;
  unsigned next_index_ = 0;
  State state_;
  std::vector<double> values_;
};

// ---- timing and retries (v1.4 §7, from memory) ----
// The data recorder wakes the sensors with a break (spacing >= 12 ms), then marks
// for >= 8.33 ms before the command. A sensor starts its reply within 15 ms of
// the command's last stop bit. With no reply the recorder waits at least 16.67 ms
// after the command and retries; retries go out within 87 ms of the previous
// command, after that a new break comes first (a sensor may sleep after 100 ms
// of marking). The spec asks for at least three retries; we repeat the break
// plus retries cycle a configurable number of times.
struct RetryPolicy {
  std::chrono::microseconds break_length{12'000};     // from memory: >= 12 ms
  std::chrono::microseconds mark_after_break{8'330};  // from memory: >= 8.33 ms
  std::chrono::microseconds reply_start_max{15'000};  // from memory: sensor starts <= 15 ms
  std::chrono::microseconds retry_wait_min{16'670};   // from memory: >= 16.67 ms
  std::chrono::microseconds retry_within{87'000};     // from memory: else a new break
  unsigned retries_per_break = 3;                     // from memory: "at least three"
  unsigned break_cycles = 2;                          // our choice, no source
};

struct Attempt {
  bool send_break = false;                            // a break (and the mark after it) first
  std::chrono::microseconds wait_for_reply_start{0};  // from the command's last stop bit
};

// The sequence of sends for one command: [break+cmd, cmd x retries_per_break] x break_cycles.
std::vector<Attempt> attempt_plan(const RetryPolicy& p = {});

// One character at 1200 baud, 7E1 (10 bits): 8333 us.
inline constexpr std::chrono::microseconds character_time{8'333};

// Time to wait for a complete reply of up to `max_chars` characters (CR LF
// included) after the command: reply start plus transmission plus one
// character time of margin (our choice, no source).
std::chrono::microseconds reply_timeout(std::size_t max_chars, const RetryPolicy& p = {});

}  // namespace tarn::protocol::sdi12
