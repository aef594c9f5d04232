// Radio frames (codec/radio_frame.h, codec/RADIO.md): COBS against published
// examples, CRC against its catalogue check value, round trips at every size up
// to the MTU, and decode errors for every kind of damage.
#include <catch2/catch.hpp>
#include <random>
#include <string>

#include "codec/crc32c.h"
#include "codec/radio_frame.h"

using namespace tarn::codec;
using namespace tarn::codec::radio;

namespace {

std::vector<std::uint8_t> bytes(std::initializer_list<int> v) {
  std::vector<std::uint8_t> out;
  for (int b : v) out.push_back(std::uint8_t(b));
  return out;
}

std::vector<std::uint8_t> range(int from, int to) {  // inclusive
  std::vector<std::uint8_t> out;
  for (int b = from; b <= to; ++b) out.push_back(std::uint8_t(b));
  return out;
}

std::span<const std::uint8_t> inner(const std::vector<std::uint8_t>& wire) {
  return {wire.data() + 1, wire.size() - 2};
}

}  // namespace

TEST_CASE("COBS matches the worked examples", "[radio]") {
  // Examples of the Wikipedia article "Consistent Overhead Byte Stuffing"
  // (examples 1-6 and 7-11; from memory), without the trailing delimiter.
  struct Case {
    std::vector<std::uint8_t> in, out;
  };
  std::vector<Case> cases = {
      {bytes({0x00}), bytes({0x01, 0x01})},
      {bytes({0x00, 0x00}), bytes({0x01, 0x01, 0x01})},
      {bytes({0x00, 0x11, 0x00}), bytes({0x01, 0x02, 0x11, 0x01})},
      {bytes({0x11, 0x22, 0x00, 0x33}), bytes({0x03, 0x11, 0x22, 0x02, 0x33})},
      {bytes({0x11, 0x22, 0x33, 0x44}), bytes({0x05, 0x11, 0x22, 0x33, 0x44})},
      {bytes({0x11, 0x00, 0x00, 0x00}), bytes({0x02, 0x11, 0x01, 0x01, 0x01})},
  };
  {  // 01 02 ... FE -> FF 01 02 ... FE
    Case c{range(0x01, 0xfe), bytes({0xff})};
    auto r = range(0x01, 0xfe);
    c.out.insert(c.out.end(), r.begin(), r.end());
    cases.push_back(c);
  }
  {  // 00 01 ... FE -> 01 FF 01 ... FE
    Case c{range(0x00, 0xfe), bytes({0x01, 0xff})};
    auto r = range(0x01, 0xfe);
    c.out.insert(c.out.end(), r.begin(), r.end());
    cases.push_back(c);
  }
  {  // 01 02 ... FF -> FF 01 ... FE 02 FF
    Case c{range(0x01, 0xff), bytes({0xff})};
    auto r = range(0x01, 0xfe);
    c.out.insert(c.out.end(), r.begin(), r.end());
    c.out.push_back(0x02);
    c.out.push_back(0xff);
    cases.push_back(c);
  }
  {  // 02 03 ... FF 00 -> FF 02 ... FF 01 01
    Case c{range(0x02, 0xff), bytes({0xff})};
    c.in.push_back(0x00);
    auto r = range(0x02, 0xff);
    c.out.insert(c.out.end(), r.begin(), r.end());
    c.out.push_back(0x01);
    c.out.push_back(0x01);
    cases.push_back(c);
  }
  {  // 03 04 ... FF 00 01 -> FE 03 ... FF 02 01
    Case c{range(0x03, 0xff), bytes({0xfe})};
    c.in.push_back(0x00);
    c.in.push_back(0x01);
    auto r = range(0x03, 0xff);
    c.out.insert(c.out.end(), r.begin(), r.end());
    c.out.push_back(0x02);
    c.out.push_back(0x01);
    cases.push_back(c);
  }
  for (auto& c : cases) {
    INFO("input of " << c.in.size() << " bytes");
    CHECK(cobs_encode(c.in) == c.out);
    std::vector<std::uint8_t> back;
    REQUIRE(cobs_decode(c.out, back));
    CHECK(back == c.in);
  }
}

TEST_CASE("COBS decode refuses malformed input", "[radio]") {
  std::vector<std::uint8_t> out;
  CHECK_FALSE(cobs_decode(bytes({0x05, 0x11, 0x22}), out));        // code past the end
  CHECK_FALSE(cobs_decode(bytes({0x03, 0x11, 0x00, 0x22}), out));  // zero inside
  CHECK_FALSE(cobs_decode(bytes({0x00}), out));                    // zero code
}

TEST_CASE("frame CRC is CRC-32C with its catalogue check value", "[radio]") {
  // Catalogue of parametrised CRC algorithms (CRC-32/ISCSI): check 0xe3069283.
  std::string s = "123456789";
  CHECK(crc32c({reinterpret_cast<const std::uint8_t*>(s.data()), s.size()}) == 0xe3069283u);
  // The station tag is its low 16 bits.
  CHECK(station_tag("123456789") == 0x9283);
}

TEST_CASE("frame vector: an ack for sequence 300", "[radio]") {
  Frame f{FrameType::ack, 0x1234, 300, {}};
  auto w = encode_frame(f, 255);
  REQUIRE(w.ok());
  // Body: 12 (version 1, type 2), tag 34 12 (LE), LEB128(300) = ac 02, CRC-32C LE.
  std::vector<std::uint8_t> body = bytes({0x12, 0x34, 0x12, 0xac, 0x02});
  std::uint32_t crc = crc32c(body);
  for (int i = 0; i < 4; ++i) body.push_back(std::uint8_t(crc >> (8 * i)));
  std::vector<std::uint8_t> want = {0x00};
  auto st = cobs_encode(body);
  want.insert(want.end(), st.begin(), st.end());
  want.push_back(0x00);
  CHECK(*w == want);
  // The same bytes with the CRC from Debian's python3-crcmod ("crc-32c"):
  // CRC-32C(12 34 12 ac 02) = 0x7631b814; no zero in the body, so COBS adds 0a.
  CHECK(*w == bytes({0x00, 0x0a, 0x12, 0x34, 0x12, 0xac, 0x02, 0x14, 0xb8, 0x31, 0x76, 0x00}));
  auto d = decode_frame(inner(*w));
  REQUIRE(d.ok());
  CHECK(d->type == FrameType::ack);
  CHECK(d->station_tag == 0x1234);
  CHECK(d->sequence == 300);
}

TEST_CASE("every payload size up to max_payload fits the MTU and round-trips", "[radio]") {
  std::mt19937 rng(7);
  for (std::size_t mtu : {32u, 64u, 255u, 256u, 300u, 1024u}) {
    std::size_t maxp = max_payload(mtu);
    REQUIRE(maxp > 0);
    for (std::size_t n = 1; n <= maxp; ++n) {
      Frame f{FrameType::data, 0xbeef, ~std::uint64_t(0), std::vector<std::uint8_t>(n)};
      // Worst case for COBS: no zero bytes at all.
      for (auto& b : f.payload) b = std::uint8_t(1 + rng() % 255);
      auto w = encode_frame(f, mtu);
      REQUIRE(w.ok());
      REQUIRE(w->size() <= mtu);
      REQUIRE(w->front() == 0);
      REQUIRE(w->back() == 0);
      auto d = decode_frame(inner(*w));
      REQUIRE(d.ok());
      REQUIRE(d->payload == f.payload);
      REQUIRE(d->sequence == f.sequence);
    }
  }
  CHECK(max_payload(255) == 235);  // 255 - 2 delimiters - 1 COBS - 17 overhead
}

TEST_CASE("a payload past max_payload may not fit and is refused, not cut", "[radio]") {
  Frame f{FrameType::data, 1, ~std::uint64_t(0),
          std::vector<std::uint8_t>(max_payload(255) + 1, 7)};
  auto w = encode_frame(f, 255);
  REQUIRE_FALSE(w.ok());
  CHECK(w.error().code == Errc::too_large);
}

TEST_CASE("encode refuses payloads a type does not allow", "[radio]") {
  CHECK_FALSE(encode_frame({FrameType::ack, 1, 1, {1}}, 255).ok());
  CHECK_FALSE(encode_frame({FrameType::data, 1, 1, {}}, 255).ok());
  CHECK_FALSE(encode_frame({FrameType::pong, 1, 1, {}}, 255).ok());
  CHECK_FALSE(encode_frame({FrameType::ping, 1, 1, std::vector<std::uint8_t>(65, 'a')}, 255).ok());
  CHECK(encode_frame({FrameType::pong, 1, 1, {1}}, 255).ok());
}

TEST_CASE("every single-bit flip of a frame is detected", "[radio]") {
  Frame f{FrameType::data, station_tag("hollin-buoy-1"), 4242, std::vector<std::uint8_t>(120)};
  for (std::size_t i = 0; i < f.payload.size(); ++i) f.payload[i] = std::uint8_t(i * 37);
  auto w = encode_frame(f, 255);
  REQUIRE(w.ok());
  std::vector<std::uint8_t> stuffed(inner(*w).begin(), inner(*w).end());
  int accepted = 0;
  for (std::size_t i = 0; i < stuffed.size(); ++i)
    for (int bit = 0; bit < 8; ++bit) {
      auto m = stuffed;
      m[i] ^= std::uint8_t(1 << bit);
      if (decode_frame(m).ok()) accepted++;
    }
  CHECK(accepted == 0);
}

TEST_CASE("decode errors name what is wrong", "[radio]") {
  auto good = *encode_frame({FrameType::data, 9, 5, {1, 2, 3}}, 255);
  std::vector<std::uint8_t> st(inner(good).begin(), inner(good).end());
  SECTION("truncated") {
    auto r = decode_frame(std::span<const std::uint8_t>(st).first(4));
    REQUIRE_FALSE(r.ok());
  }
  SECTION("empty") {
    CHECK_FALSE(decode_frame({}).ok());
  }
  auto reseal = [](std::vector<std::uint8_t> body) {
    std::uint32_t crc = crc32c(body);
    for (int i = 0; i < 4; ++i) body.push_back(std::uint8_t(crc >> (8 * i)));
    return cobs_encode(body);
  };
  SECTION("version 2") {
    auto r = decode_frame(reseal(bytes({0x21, 9, 0, 5, 1})));
    REQUIRE_FALSE(r.ok());
    CHECK(r.error().code == Errc::bad_version);
  }
  SECTION("unknown type") {
    auto r = decode_frame(reseal(bytes({0x17, 9, 0, 5, 1})));
    REQUIRE_FALSE(r.ok());
    CHECK(r.error().code == Errc::malformed);
  }
  SECTION("non-canonical sequence") {
    auto r = decode_frame(reseal(bytes({0x11, 9, 0, 0x85, 0x00, 1})));
    REQUIRE_FALSE(r.ok());
    CHECK(r.error().message.find("shortest") != std::string::npos);
  }
  SECTION("sequence running into the CRC") {
    auto r = decode_frame(reseal(bytes({0x12, 9, 0, 0x85, 0x85, 0x85})));
    REQUIRE_FALSE(r.ok());
    CHECK(r.error().code == Errc::truncated);
  }
  SECTION("sequence over 64 bits") {
    auto r = decode_frame(
        reseal(bytes({0x12, 9, 0, 0xff, 0xff, 0xff, 0xff, 0xff, 0xff, 0xff, 0xff, 0xff, 0x02})));
    REQUIRE_FALSE(r.ok());
    CHECK(r.error().code == Errc::malformed);
  }
  SECTION("largest sequence is fine") {
    auto r = decode_frame(
        reseal(bytes({0x12, 9, 0, 0xff, 0xff, 0xff, 0xff, 0xff, 0xff, 0xff, 0xff, 0xff, 0x01})));
    REQUIRE(r.ok());
    CHECK(r->sequence == ~std::uint64_t(0));
  }
}

TEST_CASE("the splitter cuts at delimiters, skips noise and bounds its buffer", "[radio]") {
  FrameSplitter s(255);
  std::vector<std::vector<std::uint8_t>> got;
  auto sink = [&](std::span<const std::uint8_t> f) { got.emplace_back(f.begin(), f.end()); };
  auto a = *encode_frame({FrameType::data, 1, 1, {1, 2, 3}}, 255);
  auto b = *encode_frame({FrameType::ack, 1, 2, {}}, 255);
  std::vector<std::uint8_t> stream = a;
  stream.insert(stream.end(), b.begin(), b.end());
  // Byte by byte: same result as all at once.
  for (std::uint8_t x : stream) s.feed({&x, 1}, sink);
  REQUIRE(got.size() == 2);
  CHECK(decode_frame(got[0])->sequence == 1);
  CHECK(decode_frame(got[1])->type == FrameType::ack);
  // 1000 bytes of noise without a delimiter: counted and dropped, never held.
  got.clear();
  std::vector<std::uint8_t> noise(1000, 0x55);
  s.feed(noise, sink);
  CHECK(s.pending_bytes() <= 255);
  CHECK(s.overlong() == 1);
  s.feed(a, sink);  // its leading delimiter ends the noise
  REQUIRE(got.size() == 1);
  CHECK(decode_frame(got[0]).ok());
}
