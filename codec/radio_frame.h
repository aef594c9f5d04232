// Radio frames: how packets cross a transparent serial radio (codec/RADIO.md).
// A frame body is [type/version u8][station tag u16][sequence LEB128][payload]
// [CRC-32C u32]; on the wire it is COBS-encoded between two 0x00 delimiters.
// Packets are opaque bytes here. Pure functions and a byte-stream splitter;
// decode never reads past the bytes it was given, whatever a field claims.
// Thread-safety: pure functions; a FrameSplitter belongs to one thread.
#pragma once

#include <cstddef>
#include <cstdint>
#include <functional>
#include <span>
#include <string_view>
#include <vector>

#include "codec/result.h"

namespace tarn::codec::radio {

inline constexpr std::uint8_t kFrameVersion = 1;

enum class FrameType : std::uint8_t {
  data = 1,     // station -> shore: one outbox packet, sequence = outbox sequence
  ack = 2,      // answer to data (shore) or command (station), same sequence, no payload
  ping = 3,     // station -> shore: sequence = ping counter, payload = station id text
  pong = 4,     // shore -> station: same sequence as the ping, payload = [ready u8]
  command = 5,  // shore -> station: downlink command bytes, sequence = relay's counter
};
const char* to_string(FrameType t);

struct Frame {
  FrameType type = FrameType::data;
  std::uint16_t station_tag = 0;
  std::uint64_t sequence = 0;
  std::vector<std::uint8_t> payload;
};

// Body bytes besides the payload, worst case: type 1 + tag 2 + LEB128 10 + CRC 4.
inline constexpr std::size_t kMaxBodyOverhead = 1 + 2 + 10 + 4;
inline constexpr std::size_t kMinBodyBytes = 1 + 2 + 1 + 4;
// Smallest and largest radio MTU (wire bytes of one frame, delimiters included).
inline constexpr std::size_t kMinRadioMtu = 32;
inline constexpr std::size_t kMaxRadioMtu = 65536;

// The tag that names a station in every frame: the low 16 bits of the
// CRC-32C of its id (RADIO.md §3). Stations sharing a relay must differ.
std::uint16_t station_tag(std::string_view station_id);

// Wire bytes of a frame whose body has `body_bytes` bytes:
// 2 delimiters + COBS (body + 1 + floor(body / 254) at most).
std::size_t wire_bytes_for_body(std::size_t body_bytes);
// The largest payload that always fits in `mtu` wire bytes, whatever the
// sequence. REQUIRES: kMinRadioMtu <= mtu <= kMaxRadioMtu.
std::size_t max_payload(std::size_t mtu);

// Frame -> wire bytes (0x00, COBS(body), 0x00). too_large if more than `mtu`.
Result<std::vector<std::uint8_t>> encode_frame(const Frame& f, std::size_t mtu);

// The bytes between two delimiters (no 0x00 inside) -> frame. Checks COBS,
// size, CRC, version and type; refuses a non-canonical sequence encoding.
Result<Frame> decode_frame(std::span<const std::uint8_t> stuffed);

// COBS (Cheshire & Baker, 1999) of arbitrary bytes, without delimiter.
std::vector<std::uint8_t> cobs_encode(std::span<const std::uint8_t> in);
// Inverse; false on a malformed input (zero byte, code past the end).
bool cobs_decode(std::span<const std::uint8_t> in, std::vector<std::uint8_t>& out);

// Cuts a byte stream at 0x00 delimiters. Holds at most `mtu` bytes: a longer
// run (noise, a lost delimiter) is counted as overlong and dropped up to the
// next delimiter. Empty runs (two delimiters in a row) are skipped.
class FrameSplitter {
 public:
  explicit FrameSplitter(std::size_t mtu) : cap_(mtu) {}
  // Calls `frame` with each complete run of stuffed bytes (valid only during the call).
  void feed(std::span<const std::uint8_t> bytes,
            const std::function<void(std::span<const std::uint8_t>)>& frame);
  std::size_t pending_bytes() const { return buf_.size(); }
  std::uint64_t overlong() const { return overlong_; }

 private:
  std::size_t cap_;
  std::vector<std::uint8_t> buf_;
  bool skipping_ = false;
  std::uint64_t overlong_ = 0;
};

}  // namespace tarn::codec::radio
