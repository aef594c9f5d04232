#include "codec/radio_frame.h"

#include <string>

#include "codec/crc32c.h"

namespace tarn::codec::radio {

namespace {

constexpr std::size_t kMaxPingPayload = 64;

// Payload sizes each type allows (RADIO.md §4).
bool payload_size_ok(FrameType t, std::size_t n) {
  switch (t) {
    case FrameType::data:
    case FrameType::command:
      return n >= 1;
    case FrameType::ack:
      return n == 0;
    case FrameType::ping:
      return n >= 1 && n <= kMaxPingPayload;
    case FrameType::pong:
      return n == 1;
  }
  return false;
}

bool known_type(std::uint8_t t) {
  return t >= 1 && t <= 5;
}

void put_leb128(std::vector<std::uint8_t>& out, std::uint64_t v) {
  do {
    std::uint8_t b = v & 0x7f;
    v >>= 7;
    out.push_back(v ? std::uint8_t(b | 0x80) : b);
  } while (v);
}

}  // namespace

const char* to_string(FrameType t) {
  switch (t) {
    case FrameType::data:
      return "data";
    case FrameType::ack:
      return "ack";
    case FrameType::ping:
      return "ping";
    case FrameType::pong:
      return "pong";
    case FrameType::command:
      return "command";
  }
  return "?";
}

std::uint16_t station_tag(std::string_view id) {
  auto crc = crc32c({reinterpret_cast<const std::uint8_t*>(id.data()), id.size()});
  return std::uint16_t(crc & 0xffff);
}

std::size_t wire_bytes_for_body(std::size_t body) {
  return 2 + body + 1 + body / 254;
}

std::size_t max_payload(std::size_t mtu) {
  std::size_t body = mtu >= 3 ? mtu - 3 : 0;
  while (body > 0 && wire_bytes_for_body(body) > mtu) --body;
  return body > kMaxBodyOverhead ? body - kMaxBodyOverhead : 0;
}

std::vector<std::uint8_t> cobs_encode(std::span<const std::uint8_t> in) {
  // A block is a code byte (1 + count of non-zero bytes that follow) and the
  // bytes; a code below 0xff implies a zero after the block. A full block
  // (code 0xff) that ends the input is not followed by an empty one.
  std::vector<std::uint8_t> out;
  out.reserve(in.size() + in.size() / 254 + 1);
  std::size_t code_at = 0;
  out.push_back(0);
  std::uint8_t code = 1;
  for (std::size_t i = 0; i < in.size(); ++i) {
    if (in[i] == 0) {
      out[code_at] = code;
      code_at = out.size();
      out.push_back(0);
      code = 1;
      continue;
    }
    out.push_back(in[i]);
    if (++code == 0xff && i + 1 < in.size()) {
      out[code_at] = code;
      code_at = out.size();
      out.push_back(0);
      code = 1;
    }
  }
  out[code_at] = code;
  return out;
}

bool cobs_decode(std::span<const std::uint8_t> in, std::vector<std::uint8_t>& out) {
  out.clear();
  out.reserve(in.size());
  std::size_t i = 0;
  while (i < in.size()) {
    std::uint8_t code = in[i++];
    if (code == 0) return false;
    std::size_t run = code - 1u;
    if (run > in.size() - i) return false;  // the code points past the bytes present
    for (std::size_t k = 0; k < run; ++k) {
      if (in[i + k] == 0) return false;
      out.push_back(in[i + k]);
    }
    i += run;
    if (code != 0xff && i < in.size()) out.push_back(0);
  }
  return true;
}

Result<std::vector<std::uint8_t>> encode_frame(const Frame& f, std::size_t mtu) {
  if (!known_type(std::uint8_t(f.type)))
    return make_error(Errc::invalid_input, "radio frame: unknown type");
  if (!payload_size_ok(f.type, f.payload.size()))
    return make_error(Errc::invalid_input, std::string("radio frame: ") + to_string(f.type) +
                                               " frame with a payload of " +
                                               std::to_string(f.payload.size()) + " bytes");
  std::vector<std::uint8_t> body;
  body.reserve(f.payload.size() + kMaxBodyOverhead);
  body.push_back(std::uint8_t(kFrameVersion << 4 | std::uint8_t(f.type)));
  body.push_back(std::uint8_t(f.station_tag & 0xff));
  body.push_back(std::uint8_t(f.station_tag >> 8));
  put_leb128(body, f.sequence);
  body.insert(body.end(), f.payload.begin(), f.payload.end());
  std::uint32_t crc = crc32c(body);
  for (int i = 0; i < 4; ++i) body.push_back(std::uint8_t(crc >> (8 * i)));
  auto stuffed = cobs_encode(body);
  if (stuffed.size() + 2 > mtu)
    return make_error(Errc::too_large, "radio frame: " + std::to_string(stuffed.size() + 2) +
                                           " wire bytes do not fit a " + std::to_string(mtu) +
                                           "-byte radio MTU");
  std::vector<std::uint8_t> wire;
  wire.reserve(stuffed.size() + 2);
  wire.push_back(0);
  wire.insert(wire.end(), stuffed.begin(), stuffed.end());
  wire.push_back(0);
  return wire;
}

Result<Frame> decode_frame(std::span<const std::uint8_t> stuffed) {
  std::vector<std::uint8_t> body;
  if (!cobs_decode(stuffed, body)) return make_error(Errc::malformed, "radio frame: bad COBS");
  if (body.size() < kMinBodyBytes)
    return make_error(Errc::truncated,
                      "radio frame: " + std::to_string(body.size()) + " bytes, fewer than 8");
  std::size_t n = body.size() - 4;
  std::uint32_t want = 0;
  for (int i = 0; i < 4; ++i) want |= std::uint32_t(body[n + std::size_t(i)]) << (8 * i);
  if (crc32c({body.data(), n}) != want) return make_error(Errc::bad_crc, "radio frame: bad CRC");
  if ((body[0] >> 4) != kFrameVersion)
    return make_error(Errc::bad_version,
                      "radio frame: version " + std::to_string(body[0] >> 4) + ", expected 1");
  if (!known_type(body[0] & 0x0f))
    return make_error(Errc::malformed,
                      "radio frame: unknown type " + std::to_string(body[0] & 0x0f));
  Frame f;
  f.type = FrameType(body[0] & 0x0f);
  f.station_tag = std::uint16_t(body[1] | body[2] << 8);
  std::size_t at = 3;
  std::uint64_t seq = 0;
  for (int shift = 0;; shift += 7) {
    if (at >= n || shift > 63)
      return make_error(Errc::truncated, "radio frame: sequence runs past the frame");
    std::uint8_t b = body[at++];
    if (shift == 63 && b > 1)
      return make_error(Errc::malformed, "radio frame: sequence exceeds 64 bits");
    seq |= std::uint64_t(b & 0x7f) << shift;
    if (!(b & 0x80)) {
      if (b == 0 && shift > 0)
        return make_error(Errc::malformed, "radio frame: sequence not in its shortest form");
      break;
    }
  }
  f.sequence = seq;
  f.payload.assign(body.begin() + std::ptrdiff_t(at), body.begin() + std::ptrdiff_t(n));
  if (!payload_size_ok(f.type, f.payload.size()))
    return make_error(Errc::malformed, std::string("radio frame: ") + to_string(f.type) +
                                           " frame with a payload of " +
                                           std::to_string(f.payload.size()) + " bytes");
  return f;
}

void FrameSplitter::feed(std::span<const std::uint8_t> bytes,
                         const std::function<void(std::span<const std::uint8_t>)>& frame) {
  for (std::uint8_t b : bytes) {
    if (b == 0) {
      if (!skipping_ && !buf_.empty()) frame(buf_);
      buf_.clear();
      skipping_ = false;
      continue;
    }
    if (skipping_) continue;
    if (buf_.size() >= cap_) {
      overlong_++;
      buf_.clear();
      skipping_ = true;
      continue;
    }
    buf_.push_back(b);
  }
}

}  // namespace tarn::codec::radio
