// Corrupt, foreign and hostile packets: every one is rejected whole with a reason.
#include <catch2/catch.hpp>

#include "codec/bit_io.h"
#include "codec/crc32c.h"
#include "codec_test_data.h"

using namespace codec_test;

namespace {

// Rewrites the CRC so that a deliberately changed packet passes the integrity check.
std::vector<std::uint8_t> reseal(std::vector<std::uint8_t> p) {
  if (p.size() < 4) return p;
  std::uint32_t c = crc32c(std::span(p).first(p.size() - 4));
  for (int i = 0; i < 4; ++i) p[p.size() - 4 + i] = std::uint8_t(c >> (8 * i));
  return p;
}

// A packet from parts: header byte, hash, sequence, raw section bytes; CRC appended.
std::vector<std::uint8_t> build(std::uint8_t b0, std::uint32_t hash, std::uint64_t seq,
                                const std::vector<std::uint8_t>& sections) {
  std::vector<std::uint8_t> p{b0};
  put_u32le(p, hash);
  put_varint(p, seq);
  p.insert(p.end(), sections.begin(), sections.end());
  put_u32le(p, crc32c(p));
  return p;
}

struct Fixture {
  Manifest m = hollin_manifest();
  CheckedManifest cm = checked(m);
  std::vector<Window> ws;
  std::vector<std::uint8_t> packet;
  Fixture() {
    std::mt19937_64 rng(77);
    for (int i = 0; i < 3; ++i) {
      Window w = random_window(rng, m, 1717200000 + i * 600, RandomShape{0.1, 0.1, 1, 0, 0, 5});
      w.clock_unsynced = false;
      ws.push_back(w);
    }
    auto ps = encode_windows(cm, ws, 9, {});
    packet = ps->front().bytes;
  }
};

}  // namespace

TEST_CASE("every single-bit error is caught by the CRC", "[decode]") {
  Fixture f;
  REQUIRE(decode_packet(f.packet, &f.cm));
  for (std::size_t bit = 0; bit < f.packet.size() * 8; ++bit) {
    auto p = f.packet;
    p[bit / 8] ^= std::uint8_t(1u << (bit % 8));
    auto d = decode_packet(p, &f.cm);
    REQUIRE_FALSE(d);
    REQUIRE(d.error().code == Errc::bad_crc);
  }
}

TEST_CASE("every truncation is rejected, resealed or not", "[decode]") {
  Fixture f;
  auto secs = list_sections(f.packet);
  REQUIRE(secs);
  REQUIRE(secs->size() == 2);  // windows + reasons
  for (std::size_t n = 0; n < f.packet.size(); ++n) {
    std::vector<std::uint8_t> cut(f.packet.begin(), f.packet.begin() + std::ptrdiff_t(n));
    REQUIRE_FALSE(decode_packet(cut, &f.cm));
    // Cut inside the data, then given a valid CRC: the lengths no longer add up.
    if (n < 9) continue;
    std::vector<std::uint8_t> body(f.packet.begin(), f.packet.begin() + std::ptrdiff_t(n - 4));
    const std::size_t end_of_windows = (*secs)[0].offset + (*secs)[0].length;
    // A header alone, or a packet without its reasons section, is a whole packet again.
    const std::size_t header_len = (*secs)[0].offset - 1 - varint_size((*secs)[0].length);
    if (body.size() == header_len || body.size() == end_of_windows) continue;
    body.insert(body.end(), 4, 0);
    auto d = decode_packet(reseal(body), &f.cm);
    INFO("cut at " << n);
    REQUIRE_FALSE(d);
  }
}

TEST_CASE("foreign and mismatched packets are named as such", "[decode]") {
  Fixture f;
  auto p = f.packet;
  REQUIRE((p[0] >> 4) == 2);
  for (std::uint8_t v : {0, 3, 15}) {
    p[0] = std::uint8_t(v << 4 | (p[0] & 0x0f));
    auto d = decode_packet(reseal(p), &f.cm);
    REQUIRE_FALSE(d);
    CHECK(d.error().code == Errc::bad_version);
    CHECK(d.error().message.find("version " + std::to_string(v)) != std::string::npos);
  }
  // Version 1 is read, but its packets carry the version 1 hash of the manifest.
  p[0] = std::uint8_t(0x10 | (p[0] & 0x0f));
  auto d = decode_packet(reseal(p), &f.cm);
  REQUIRE_FALSE(d);
  CHECK(d.error().code == Errc::manifest_mismatch);

  Manifest other = f.m;
  other.channels[0].resolution = 0.1;
  auto cm2 = checked(other);
  d = decode_packet(f.packet, &cm2);
  REQUIRE_FALSE(d);
  CHECK(d.error().code == Errc::manifest_mismatch);
  d = decode_packet(f.packet, nullptr);
  REQUIRE_FALSE(d);
  CHECK(d.error().code == Errc::manifest_mismatch);

  std::vector<std::uint8_t> text{'h', 'e', 'l', 'l', 'o', ' ', 'w', 'o', 'r', 'l', 'd', '\n'};
  d = decode_packet(text, &f.cm);
  REQUIRE_FALSE(d);
  CHECK(d.error().code == Errc::bad_crc);
  CHECK_FALSE(decode_packet({}, &f.cm));
}

TEST_CASE("unknown sections are skipped by their length", "[decode]") {
  Fixture f;
  auto base = decode_packet(f.packet, &f.cm);
  REQUIRE(base);
  // Insert section type 0x40 with 5 bytes before the CRC.
  std::vector<std::uint8_t> p(f.packet.begin(), f.packet.end() - 4);
  std::vector<std::uint8_t> extra{0x40, 0x05, 1, 2, 3, 4, 5};
  p.insert(p.end(), extra.begin(), extra.end());
  p.insert(p.end(), 4, 0);
  auto d = decode_packet(reseal(p), &f.cm);
  INFO((d ? "" : d.error().message));
  REQUIRE(d);
  CHECK(d->skipped_sections == std::vector<std::uint8_t>{0x40});
  CHECK(d->windows == base->windows);
  // An unknown section whose length runs past the end is still refused.
  p.resize(p.size() - 4 - 7);
  std::vector<std::uint8_t> bad{0x40, 0x7f, 1};
  p.insert(p.end(), bad.begin(), bad.end());
  p.insert(p.end(), 4, 0);
  d = decode_packet(reseal(p), &f.cm);
  REQUIRE_FALSE(d);
  CHECK(d.error().code == Errc::truncated);
}

TEST_CASE("structural errors inside sections are refused", "[decode]") {
  Fixture f;
  const std::uint32_t h = f.cm.hash;
  auto section = [](std::uint8_t type, std::vector<std::uint8_t> body) {
    std::vector<std::uint8_t> s{type};
    put_varint(s, body.size());
    s.insert(s.end(), body.begin(), body.end());
    return s;
  };
  auto refused = [&](const std::vector<std::uint8_t>& p, Errc code, const std::string& part) {
    auto d = decode_packet(p, &f.cm);
    REQUIRE_FALSE(d);
    INFO(d.error().message);
    CHECK(d.error().code == code);
    CHECK(d.error().message.find(part) != std::string::npos);
  };
  // A window count of 255 in a 3-byte section: refused before anything is allocated.
  refused(build(0x20, h, 1, section(1, {0x00, 0xff, 0x01, 0x00})), Errc::malformed, "cannot fit");
  refused(build(0x20, h, 1, section(1, {0x00, 0x00})), Errc::malformed, "window count 0");
  // One window, all channels all pass, no values present is impossible: the value
  // codes are missing, so the section ends early.
  refused(build(0x20, h, 1, section(1, {0x00, 0x01, 0x00})), Errc::truncated, "cut short");
  // Section type 0.
  refused(build(0x20, h, 1, section(0, {})), Errc::malformed, "type 0");
  // Reasons without windows.
  refused(build(0x20, h, 1, section(3, {0x00})), Errc::malformed, "reasons section");
  // A repeated section.
  auto secs = *list_sections(f.packet);
  const std::size_t head = 1 + varint_size(secs[0].length);
  std::vector<std::uint8_t> win(f.packet.begin() + std::ptrdiff_t(secs[0].offset - head),
                                f.packet.begin() + std::ptrdiff_t(secs[0].offset + secs[0].length));
  REQUIRE(win[0] == 1);
  std::vector<std::uint8_t> twice = win;
  twice.insert(twice.end(), win.begin(), win.end());
  refused(build(0x20, h, 1, twice), Errc::malformed, "repeated");
  // Header flags that disagree with the windows (partial bit set, no partial window).
  refused(build(0x22, h, 1, win), Errc::malformed, "header flags");
  // Non-zero padding after the last field.
  auto padded = win;
  padded.back() |= 0x01;
  auto d = decode_packet(build(0x20, h, 1, padded), &f.cm);
  if (!d) {
    CHECK((d.error().code == Errc::malformed || d.error().code == Errc::truncated));
  }
  // Sections that need the manifest, with the manifest absent: named.
  auto nd = decode_packet(build(0x20, h, 1, win), nullptr);
  REQUIRE_FALSE(nd);
  CHECK(nd.error().message.find("no manifest") != std::string::npos);
  // Alert count larger than the section could hold.
  refused(build(0x20, h, 1, section(4, {0x7f, 0, 0})), Errc::malformed, "alert count");
  // Health record with an unknown field bit.
  refused(build(0x20, h, 1, section(6, {0x01, 0x08, 0x00})), Errc::malformed, "unknown field");
  // Manifest part index beyond its count.
  refused(build(0x20, h, 1, section(5, {0x03, 0x02, 0xaa})), Errc::malformed, "part");
  // A single-part manifest whose bytes do not hash to the header's value.
  refused(build(0x20, 0x12345678, 1, section(5, {0x00, 0x01, 0x00})), Errc::malformed, "hash");

  // Version 2 alerts: one event of channel 0, level 1 "w", previous 0, window index 0,
  // statistic 0, rule "r", then the kind/cause byte.
  auto alert = [&](std::uint8_t kind_cause) {
    return section(4, {0x01, 0x00, 0x01, 0x01, 'w', 0x00, 0x00, 0x00, 0x01, 'r', kind_cause});
  };
  REQUIRE(decode_packet(build(0x20, h, 1, alert(0x00)), &f.cm));
  auto stale = decode_packet(build(0x20, h, 1, alert(0x21)), &f.cm);
  REQUIRE(stale);
  CHECK(stale->alerts.at(0).kind == AlertKind::stale);
  CHECK(stale->alerts.at(0).cause == StaleCause::no_values);
  refused(build(0x20, h, 1, alert(0x03)), Errc::malformed, "kind or cause");  // kind 3
  refused(build(0x20, h, 1, alert(0x40)), Errc::malformed, "kind or cause");  // cause 4
  refused(build(0x20, h, 1, alert(0x10)), Errc::malformed, "cause");          // change with cause
  refused(build(0x20, h, 1, alert(0x01)), Errc::malformed, "cause");          // stale without
  // The same event in a version 1 packet has no kind/cause byte: a trailing byte there.
  refused(build(0x10, f.cm.hash_v1, 1, alert(0x00)), Errc::malformed, "trailing");

  // Cleanings (type 7): count beyond the section, a time past 2300, a truncated median,
  // a channel outside the manifest.
  refused(build(0x20, h, 1, section(7, {0x02, 0, 0, 0, 0, 0})), Errc::malformed, "cleaning count");
  std::vector<std::uint8_t> late{0x01, 0x00};
  put_varint(late, zigzag(10413792000 - 1704067200));
  late.insert(late.end(), {0x01, 0x00, 0x00});  // one second long: past the end of 2299
  refused(build(0x20, h, 1, section(7, late)), Errc::malformed, "time out of range");
  refused(build(0x20, h, 1, section(7, {0x01, 0x00, 0x00, 0x00, 0x01, 0x00})), Errc::truncated,
          "cut short");
  refused(build(0x20, h, 1, section(7, {0x01, 0x09, 0x00, 0x00, 0x00, 0x00})), Errc::malformed,
          "channel index");
  // In a version 1 packet type 7 is unknown: skipped by its length, as version 1 did.
  auto v1 = decode_packet(build(0x10, f.cm.hash_v1, 1, section(7, {0xee})), &f.cm);
  REQUIRE(v1);
  CHECK(v1->skipped_sections == std::vector<std::uint8_t>{7});
  CHECK(v1->cleanings.empty());
}

TEST_CASE("varint sequence numbers up to 2^64-1 survive", "[decode]") {
  Fixture f;
  auto ps = encode_windows(f.cm, f.ws, UINT64_MAX - 1, {});
  REQUIRE(ps);
  auto d = decode_packet(ps->front().bytes, &f.cm);
  REQUIRE(d);
  CHECK(d->header.sequence == UINT64_MAX - 1);
}
