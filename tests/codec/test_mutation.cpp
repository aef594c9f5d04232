// A bounded mutation run of the decoder inside the normal test command (the libFuzzer
// target tests/fuzz/fuzz_codec_decode.cpp explores further). No crash, no sanitizer
// report; a packet that decodes re-encodes to one that decodes to the same data.
#include <catch2/catch.hpp>

#include <filesystem>
#include <fstream>

#include "codec/crc32c.h"
#include "codec_test_data.h"

using namespace codec_test;

namespace {

std::vector<std::uint8_t> reseal(std::vector<std::uint8_t> p) {
  if (p.size() < 4) return p;
  std::uint32_t c = crc32c(std::span(p).first(p.size() - 4));
  for (int i = 0; i < 4; ++i) p[p.size() - 4 + i] = std::uint8_t(c >> (8 * i));
  return p;
}

std::vector<std::vector<std::uint8_t>> seed_packets(const CheckedManifest& cm) {
  std::mt19937_64 rng(1);
  std::vector<std::vector<std::uint8_t>> seeds;
  std::vector<Window> ws;
  for (int i = 0; i < 12; ++i) ws.push_back(random_window(rng, cm.manifest, 1717200000 + i * 600));
  for (bool stats : {false, true})
    for (std::size_t mtu : {std::size_t(kMaxPacketBytes), std::size_t(60)}) {
      EncodeOptions o;
      o.stats_only = stats;
      o.mtu = mtu;
      for (auto& p : *encode_windows(cm, ws, 1, o)) seeds.push_back(p.bytes);
    }
  std::vector<AlertEvent> ev{
      {1, 2, "warning", 1, 31.42, 1717200600, "pc-bloom", AlertKind::change, StaleCause::none}};
  seeds.push_back(*encode_alerts(cm, ev, 5));
  std::vector<HealthRecord> hs{{1717200000, 41.3, 1234, 12.61}};
  seeds.push_back(*encode_health(cm, hs, 6));
  for (auto& p : *encode_manifest(cm, 7)) seeds.push_back(p.bytes);
  for (auto& p : *encode_manifest(cm, 8, 48)) seeds.push_back(p.bytes);
  return seeds;
}

std::vector<std::uint8_t> mutate(std::vector<std::uint8_t> p, std::mt19937_64& rng) {
  const int edits = 1 + int(rng() % 4);
  for (int e = 0; e < edits; ++e) {
    if (p.empty()) p.push_back(0);
    std::size_t at = rng() % p.size();
    switch (rng() % 6) {
      case 0:
        p[at] ^= std::uint8_t(1u << (rng() % 8));
        break;
      case 1:
        p[at] = std::uint8_t(rng());
        break;
      case 2:
        p.insert(p.begin() + std::ptrdiff_t(at), std::uint8_t(rng()));
        break;
      case 3:
        p.erase(p.begin() + std::ptrdiff_t(at));
        break;
      case 4:
        p[at] = std::uint8_t(rng() % 2 ? 0xff : 0x00);
        break;
      case 5:
        p.resize(at + 1);
        break;
    }
  }
  return p;
}

// Everything a decoded packet says, for comparing two decodes.
bool same_data(const DecodedPacket& a, const DecodedPacket& b, const Manifest& m) {
  if (a.windows.size() != b.windows.size()) return false;
  for (std::size_t i = 0; i < a.windows.size(); ++i) {
    const Window &x = a.windows[i], &y = b.windows[i];
    if (x.start != y.start || x.slots != y.slots || x.partial != y.partial ||
        x.clock_unsynced != y.clock_unsynced || x.channels.size() != y.channels.size())
      return false;
    for (std::size_t c = 0; c < x.channels.size(); ++c) {
      const auto &p = x.channels[c], &q = y.channels[c];
      const double res = m.channels[x.first_channel + c].resolution;
      if (p.flags != q.flags || p.reasons != q.reasons || p.stats.counts != q.stats.counts)
        return false;
      for (std::size_t s = 0; s < p.values.size(); ++s)
        if (p.values[s].has_value() != q.values[s].has_value() ||
            (p.values[s] &&
             std::fabs(*p.values[s] - *q.values[s]) > res * 1e-6 + std::fabs(*p.values[s]) * 1e-12))
          return false;
    }
  }
  return a.alerts.size() == b.alerts.size() && a.health == b.health;
}

}  // namespace

TEST_CASE("bounded mutation run: the decoder rejects or decodes, never crashes", "[mutation]") {
  const CheckedManifest cm = checked(hollin_manifest());
  const auto seeds = seed_packets(cm);
  std::mt19937_64 rng(424242);
  std::size_t decoded = 0, rejected = 0, reencoded = 0;
  for (int iter = 0; iter < 60000; ++iter) {
    auto p = mutate(seeds[rng() % seeds.size()], rng);
    if (rng() % 10 != 0) p = reseal(p);  // mostly past the CRC, to reach the section decoders
    auto d = decode_packet(p, &cm);
    if (!d) {
      REQUIRE_FALSE(d.error().message.empty());
      ++rejected;
      continue;
    }
    ++decoded;
    // Re-encode whole-channel window packets and compare the data.
    if (d->windows.empty() || d->windows[0].first_channel != 0 ||
        d->windows[0].channels.size() != cm.manifest.channels.size())
      continue;
    EncodeOptions o;
    o.stats_only = d->windows[0].stats_only;
    o.windows_per_packet = kMaxWindowsPerSection;
    auto again = encode_windows(cm, d->windows, d->header.sequence, o);
    if (!again) {
      // Only values at the edge of the 2^53 range may fail to quantise back.
      REQUIRE(again.error().message.find("too large") != std::string::npos);
      continue;
    }
    for (auto& ep : *again) {
      auto d2 = decode_packet(ep.bytes, &cm);
      REQUIRE(d2);
    }
    if (again->size() == 1) {
      auto d2 = decode_packet(again->front().bytes, &cm);
      DecodedPacket a = *d;
      a.alerts.clear(), a.health.clear();
      REQUIRE(same_data(a, *d2, cm.manifest));
      ++reencoded;
    }
  }
  INFO("decoded " << decoded << " rejected " << rejected << " re-encoded " << reencoded);
  CHECK(decoded > 100);
  CHECK(rejected > 1000);
}

TEST_CASE("the fuzz seed corpus decodes", "[mutation]") {
  // tests/fuzz/corpus/codec_decode/ holds vector packets as binary files.
  namespace fs = std::filesystem;
  fs::path dir = fs::path(TARN_SOURCE_DIR) / "tests/fuzz/corpus/codec_decode";
  REQUIRE(fs::is_directory(dir));
  std::size_t n = 0;
  for (auto& e : fs::directory_iterator(dir)) {
    std::ifstream in(e.path(), std::ios::binary);
    std::vector<std::uint8_t> p((std::istreambuf_iterator<char>(in)), {});
    auto h = peek_header(p);
    INFO(e.path().string() << ": " << (h ? "" : h.error().message));
    CHECK(h);
    ++n;
  }
  CHECK(n >= 5);
}
