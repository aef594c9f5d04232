// decode(encode(x)) == x quantised, for random and edge-case windows, across MTU splits.
#include <catch2/catch.hpp>

#include <map>

#include "codec_test_data.h"

using namespace codec_test;

namespace {

// Decoded values must sit exactly on the grid the encoder rounded to.
void require_same_samples(const Window& got, const Window& want, const Manifest& m) {
  REQUIRE(got.start == want.start);
  REQUIRE(got.slots == want.slots);
  REQUIRE(got.partial == want.partial);
  REQUIRE(got.clock_unsynced == want.clock_unsynced);
  REQUIRE(got.channels.size() == want.channels.size());
  for (std::size_t c = 0; c < got.channels.size(); ++c) {
    const auto& g = got.channels[c];
    const auto& e = want.channels[c];
    const double res = m.channels[got.first_channel + c].resolution;
    REQUIRE(g.flags == e.flags);
    REQUIRE(g.values.size() == e.values.size());
    for (std::size_t i = 0; i < g.values.size(); ++i) {
      REQUIRE(g.values[i].has_value() == e.values[i].has_value());
      if (g.values[i]) {
        REQUIRE(std::llround(*g.values[i] / res) == std::llround(*e.values[i] / res));
        // Reconstruction error at most half a resolution step (plus rounding of doubles).
        REQUIRE(std::fabs(*g.values[i] - *e.values[i]) <= res * (0.5 + 1e-9));
      }
    }
    std::vector<std::uint32_t> gr = g.reasons, er = e.reasons;
    bool any = false;
    for (auto r : er) any |= r != 0;
    if (!any) er.clear();
    REQUIRE(gr == er);
  }
}

// Statistics within one resolution step of the statistics of the unquantised window.
void require_close_stats(const ChannelStats& got, const ChannelStats& want, double res) {
  REQUIRE(got.counts == want.counts);
  REQUIRE(got.first_t == want.first_t);
  REQUIRE(got.last_t == want.last_t);
  REQUIRE(got.reasons_any == want.reasons_any);
  REQUIRE(got.mean.has_value() == want.mean.has_value());
  if (!got.mean) return;
  REQUIRE(std::fabs(*got.mean - *want.mean) <= res);
  REQUIRE(std::fabs(*got.min - *want.min) <= res);
  REQUIRE(std::fabs(*got.max - *want.max) <= res);
  REQUIRE(std::fabs(*got.sd - *want.sd) <= res);
}

std::vector<Window> random_batch(std::mt19937_64& rng, const Manifest& m, std::size_t n,
                                 const RandomShape& shape = {}) {
  std::vector<Window> ws;
  std::int64_t start = 1717200000;  // 2024-06-01T00:00:00Z
  for (std::size_t i = 0; i < n; ++i) {
    if (rng() % 8 == 0) start += m.window_s * std::int64_t(1 + rng() % 30);  // gaps
    ws.push_back(random_window(rng, m, start, shape));
    start += m.window_s;
  }
  return ws;
}

// Decodes every packet alone and puts the fragments back into whole windows.
std::vector<Window> decode_all(const std::vector<EncodedPacket>& ps, const CheckedManifest& cm,
                               std::size_t mtu) {
  std::map<std::int64_t, Window> by_start;
  for (const auto& p : ps) {
    REQUIRE(p.bytes.size() <= mtu);
    auto d = decode_packet(p.bytes, &cm);
    INFO("packet " << p.sequence << ": " << (d ? "" : d.error().message));
    REQUIRE(d);
    REQUIRE(d->header.sequence == p.sequence);
    REQUIRE(d->windows.size() == p.window_count);
    for (auto& w : d->windows) {
      REQUIRE(w.first_channel == p.first_channel);
      REQUIRE(w.channels.size() == p.channel_count);
      auto [it, fresh] = by_start.try_emplace(w.start, w);
      if (fresh) {
        it->second.channels.assign(cm.manifest.channels.size(), ChannelWindow{});
        it->second.first_channel = 0;
      }
      for (std::size_t c = 0; c < w.channels.size(); ++c) {
        auto& slot = it->second.channels[w.first_channel + c];
        REQUIRE(slot.flags.empty());  // each channel of a window arrives once
        slot = w.channels[c];
      }
    }
  }
  std::vector<Window> out;
  for (auto& [_, w] : by_start) out.push_back(w);
  return out;
}

}  // namespace

TEST_CASE("random windows round trip across window counts and MTUs", "[roundtrip]") {
  const Manifest m = hollin_manifest();
  const CheckedManifest cm = checked(m);
  std::mt19937_64 rng(20240601);
  for (std::size_t mtu : {std::size_t(kMaxPacketBytes), std::size_t(1500), std::size_t(242),
                          std::size_t(120), std::size_t(64)}) {
    for (std::size_t wpp : {1, 2, 6, 24}) {
      auto ws = random_batch(rng, m, 30);
      EncodeOptions o;
      o.mtu = mtu;
      o.windows_per_packet = wpp;
      auto ps = encode_windows(cm, ws, 1000, o);
      INFO("mtu " << mtu << " wpp " << wpp << ": " << (ps ? "" : ps.error().message));
      REQUIRE(ps);
      for (std::size_t i = 0; i < ps->size(); ++i) REQUIRE((*ps)[i].sequence == 1000 + i);
      auto back = decode_all(*ps, cm, mtu);
      REQUIRE(back.size() == ws.size());
      for (std::size_t i = 0; i < ws.size(); ++i) {
        require_same_samples(back[i], ws[i], m);
        for (std::size_t c = 0; c < m.channels.size(); ++c)
          require_close_stats(back[i].channels[c].stats, ws[i].channels[c].stats,
                              m.channels[c].resolution);
      }
    }
  }
}

TEST_CASE("MTU split packs windows greedily and splits channels only when needed", "[roundtrip]") {
  const Manifest m = hollin_manifest();
  const CheckedManifest cm = checked(m);
  std::mt19937_64 rng(3);
  RandomShape noisy{0, 0, 0, 0, 0, 60};
  auto ws = random_batch(rng, m, 12, noisy);
  EncodeOptions o;
  o.windows_per_packet = 6;
  auto whole = encode_windows(cm, ws, 0, o);
  REQUIRE(whole);
  CHECK(whole->size() == 2);
  o.mtu = 50;  // one window of 40 samples at ~8 bits each does not fit: channel groups
  auto small = encode_windows(cm, ws, 0, o);
  REQUIRE(small);
  for (auto& p : *small) {
    CHECK(p.bytes.size() <= 50);
    CHECK(p.window_count == 1);
    CHECK(p.channel_count < 4);
  }
  auto back = decode_all(*small, cm, 50);
  REQUIRE(back.size() == ws.size());
  for (std::size_t i = 0; i < ws.size(); ++i) require_same_samples(back[i], ws[i], m);
}

TEST_CASE("one channel of one window over the MTU is refused, not truncated", "[roundtrip]") {
  const Manifest m = hollin_manifest(1, 3600);  // 3600 slots per window
  const CheckedManifest cm = checked(m);
  std::mt19937_64 rng(5);
  std::vector<Window> ws{random_window(rng, m, 1717200000, RandomShape{0, 0, 0, 0, 0, 50})};
  EncodeOptions o;
  o.mtu = 100;
  auto r = encode_windows(cm, ws, 0, o);
  REQUIRE_FALSE(r);
  CHECK(r.error().code == Errc::too_large);
  CHECK(r.error().message.find("channel 'chl'") != std::string::npos);
}

TEST_CASE("statistics-only packets round trip within one resolution step", "[roundtrip]") {
  const Manifest m = hollin_manifest();
  const CheckedManifest cm = checked(m);
  std::mt19937_64 rng(11);
  for (std::size_t wpp : {1, 6, 30}) {
    auto ws = random_batch(rng, m, 30);
    EncodeOptions o;
    o.stats_only = true;
    o.windows_per_packet = wpp;
    auto ps = encode_windows(cm, ws, 7, o);
    INFO((ps ? "" : ps.error().message));
    REQUIRE(ps);
    std::size_t wi = 0;
    for (auto& p : *ps) {
      auto d = decode_packet(p.bytes, &cm);
      INFO((d ? "" : d.error().message));
      REQUIRE(d);
      for (auto& w : d->windows) {
        const Window& e = ws[wi++];
        CHECK(w.stats_only);
        CHECK(w.start == e.start);
        CHECK(w.slots == e.slots);
        CHECK(w.partial == e.partial);
        CHECK(w.clock_unsynced == e.clock_unsynced);
        for (std::size_t c = 0; c < m.channels.size(); ++c) {
          CHECK(w.channels[c].values.empty());
          require_close_stats(w.channels[c].stats, e.channels[c].stats, m.channels[c].resolution);
        }
      }
    }
    CHECK(wi == ws.size());
  }
}

TEST_CASE("edge cases: all missing, one sample, extreme and negative values", "[roundtrip]") {
  const Manifest m = hollin_manifest();
  const CheckedManifest cm = checked(m);
  Window w;
  w.start = 1717200000;
  w.slots = 10;
  const double big = 4.0e13;  // 4e15 steps of 0.01: jumps of 8e15 steps near the 2^53 limit
  for (int c = 0; c < 4; ++c) {
    ChannelWindow ch;
    for (int i = 0; i < 10; ++i) {
      Flag f = Flag::pass;
      std::optional<double> v;
      switch (c) {
        case 0:
          f = Flag::missing;
          break;  // all missing
        case 1:
          f = i == 4 ? Flag::pass : Flag::missing;
          v = 0.5;
          break;  // one sample
        case 2:
          v = (i % 2 ? big : -big);
          break;  // largest jumps: escapes
        case 3:
          v = -1.234 - i * 0.001;
          f = Flag(i % 2 ? 3 : 4);
          break;  // negative, flagged
      }
      if (f == Flag::missing) v.reset();
      ch.flags.push_back(f);
      ch.values.push_back(v);
    }
    ch.stats = summarise(ch, w.start, 60);
    w.channels.push_back(ch);
  }
  std::vector<Window> ws{w};
  for (bool stats_only : {false, true}) {
    EncodeOptions o;
    o.stats_only = stats_only;
    auto ps = encode_windows(cm, ws, 1, o);
    INFO((ps ? "" : ps.error().message));
    REQUIRE(ps);
    REQUIRE(ps->size() == 1);
    auto d = decode_packet(ps->front().bytes, &cm);
    INFO((d ? "" : d.error().message));
    REQUIRE(d);
    if (!stats_only) require_same_samples(d->windows[0], quantised(w, m), m);
    for (int c = 0; c < 4; ++c)
      require_close_stats(d->windows[0].channels[c].stats, w.channels[c].stats,
                          m.channels[c].resolution);
    CHECK_FALSE(d->windows[0].channels[0].stats.mean);
    CHECK(d->windows[0].channels[1].stats.first_t == w.start + 240);
  }
}

TEST_CASE("times before 1970 and far ahead round trip", "[roundtrip]") {
  const Manifest m = hollin_manifest(604800, 6048000);  // weekly samples, 10-week windows
  const CheckedManifest cm = checked(m);
  std::mt19937_64 rng(1958);
  std::vector<Window> ws;
  for (std::int64_t start : {std::int64_t(-371865600) / 6048000 * 6048000 - 6048000,
                             std::int64_t(0), std::int64_t(6048000) * 1700}) {
    ws.push_back(random_window(rng, m, start));
  }
  auto ps = encode_windows(cm, ws, 1, {});
  INFO((ps ? "" : ps.error().message));
  REQUIRE(ps);
  auto back = decode_all(*ps, cm, kMaxPacketBytes);
  REQUIRE(back.size() == 3);
  for (int i = 0; i < 3; ++i) require_same_samples(back[i], ws[i], m);
}

TEST_CASE("encoder refuses input that breaks its contract, naming the place", "[encoder]") {
  const Manifest m = hollin_manifest();
  const CheckedManifest cm = checked(m);
  std::mt19937_64 rng(9);
  auto base = [&] { return random_window(rng, m, 1717200000, RandomShape{0, 0, 0, 0, 0, 5}); };
  auto refused = [&](std::vector<Window> ws, const std::string& part, EncodeOptions o = {}) {
    auto r = encode_windows(cm, ws, 0, o);
    REQUIRE_FALSE(r);
    CHECK(r.error().code == Errc::invalid_input);
    INFO(r.error().message);
    CHECK(r.error().message.find(part) != std::string::npos);
  };
  Window w = base();
  w.start += 30;
  refused({w}, "multiple of window_s");
  refused({base(), base()}, "increasing start");
  w = base();
  w.channels[1].flags[3] = Flag::missing;
  refused({w}, "channel 'pc' slot 3");
  w = base();
  w.channels[0].values[2].reset();
  refused({w}, "slot 2");
  w = base();
  w.channels[2].values[0] = std::nan("");
  refused({w}, "not finite");
  w = base();
  w.channels[3].values[0] = 1e300;
  refused({w}, "too large");
  w = base();
  w.channels[0].flags[0] = Flag(5);
  refused({w}, "flag 5");
  w = base();
  w.channels.pop_back();
  refused({w}, "4 manifest channels");
  w = base();
  w.slots = 9;
  refused({w}, "partial");
  w = base();
  w.channels[0].stats.counts[0] = 3;
  EncodeOptions so;
  so.stats_only = true;
  refused({w}, "add up", so);
  w = base();
  w.channels[0].stats.min = *w.channels[0].stats.mean + 1;
  refused({w}, "min <= mean", so);
  EncodeOptions tiny;
  tiny.mtu = 5;
  refused({base()}, "mtu", tiny);
}

TEST_CASE("alerts, health and the manifest round trip", "[roundtrip]") {
  const Manifest m = hollin_manifest();
  const CheckedManifest cm = checked(m);
  std::vector<AlertEvent> ev{
      {1, 2, "warning", 1, 31.42, 1717200600, "pc-bloom", AlertKind::change, StaleCause::none},
      {0, 0, "", 1, -0.05, 1717200000, ""}};
  auto a = encode_alerts(cm, ev, 42, true);
  REQUIRE(a);
  auto d = decode_packet(*a, &cm);
  REQUIRE(d);
  CHECK(d->header.sequence == 42);
  CHECK(d->header.clock_unsynced);
  REQUIRE(d->alerts.size() == 2);
  CHECK(d->alerts[0].rule_id == "pc-bloom");
  CHECK(d->alerts[0].statistic == Approx(31.42).margin(1e-9));
  CHECK(d->alerts[1].statistic == Approx(-0.05).margin(1e-9));
  CHECK(d->alerts[0].window_start == 1717200600);

  std::vector<HealthRecord> hs{{1717200000, 41.3, 1234, 12.61}, {1717203600, {}, {}, {}}};
  auto h = encode_health(cm, hs, 43);
  REQUIRE(h);
  auto dh = decode_packet(*h, nullptr);  // health needs no manifest
  REQUIRE(dh);
  REQUIRE(dh->health.size() == 2);
  CHECK(*dh->health[0].board_temp_c == Approx(41.3));
  CHECK(*dh->health[0].disk_free_mib == 1234);
  CHECK(*dh->health[0].supply_v == Approx(12.61));
  CHECK_FALSE(dh->health[1].supply_v);

  auto one = encode_manifest(cm, 5);
  REQUIRE(one);
  REQUIRE(one->size() == 1);
  auto dm = decode_packet(one->front().bytes, nullptr);
  REQUIRE(dm);
  REQUIRE(dm->manifest);
  CHECK(*dm->manifest == m);
  CHECK(dm->header.manifest_hash == cm.hash);

  auto parts = encode_manifest(cm, 100, 40);
  REQUIRE(parts);
  CHECK(parts->size() > 5);
  std::vector<ManifestPart> got;
  for (auto it = parts->rbegin(); it != parts->rend(); ++it) {  // any order
    CHECK(it->bytes.size() <= 40);
    auto dp = decode_packet(it->bytes, nullptr);
    REQUIRE(dp);
    CHECK_FALSE(dp->manifest);
    got.push_back(*dp->manifest_part);
  }
  auto back = assemble_manifest(got, cm.hash);
  REQUIRE(back);
  CHECK(*back == m);
  got.pop_back();
  CHECK_FALSE(assemble_manifest(got, cm.hash));
}

TEST_CASE("manifest validation names the field", "[manifest]") {
  Manifest m = hollin_manifest();
  CHECK(validate(m));
  auto fails = [](Manifest x, const std::string& part) {
    auto r = validate(x);
    REQUIRE_FALSE(r);
    INFO(r.error().message);
    CHECK(r.error().message.find(part) != std::string::npos);
  };
  Manifest x = m;
  x.window_s = 650;
  fails(x, "window_s");
  x = m;
  x.channels[2].name = "chl";
  fails(x, "channels[2].name");
  x = m;
  x.channels[1].resolution = 0;
  fails(x, "channels[1].resolution");
  x = m;
  x.period_s = 1;
  x.window_s = 86400;
  fails(x, "at most 4096");
  // The hash follows every field.
  x = m;
  x.channels[3].resolution = 0.01;
  CHECK(manifest_hash(x) != manifest_hash(m));
  auto bytes = canonical_bytes(m);
  auto back = parse_canonical_manifest(bytes);
  REQUIRE(back);
  CHECK(*back == m);
  bytes.push_back(0);
  CHECK_FALSE(parse_canonical_manifest(bytes));
}
