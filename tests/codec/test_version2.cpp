// Format version 2 (codec/FORMAT.md): manifest provenance, alert kinds and stale causes,
// cleaning records, statistics over not-evaluated samples, and version 1 packets still
// decoding as before.
#include <catch2/catch.hpp>

#include "codec/bit_io.h"
#include "codec/crc32c.h"
#include "codec_test_data.h"

using namespace codec_test;

namespace {

// A version 2 packet turned into the version 1 packet with the same sections: the
// version nibble and the manifest hash change, the CRC follows.
std::vector<std::uint8_t> as_version1(std::vector<std::uint8_t> p, const CheckedManifest& cm) {
  p[0] = std::uint8_t(0x10 | (p[0] & 0x0f));
  p.resize(p.size() - 4);
  std::vector<std::uint8_t> hash;
  put_u32le(hash, cm.hash_v1);
  std::copy(hash.begin(), hash.end(), p.begin() + 1);
  put_u32le(p, crc32c(p));
  return p;
}

ChannelWindow channel(std::vector<Flag> flags, std::vector<double> values) {
  ChannelWindow c;
  c.flags = flags;
  for (std::size_t i = 0; i < flags.size(); ++i)
    c.values.push_back(flags[i] == Flag::missing ? std::nullopt : std::optional<double>(values[i]));
  return c;
}

}  // namespace

TEST_CASE("calendar dates: the Gregorian leap-year rule and days since 1970", "[manifest]") {
  // Days since 1970-01-01 of dates whose Unix time is known: 946684800 s is
  // 2000-01-01T00:00Z and 1704067200 s is 2024-01-01T00:00Z (the tarn epoch of
  // FORMAT.md §1.4), -2208988800 s is 1900-01-01T00:00Z (POSIX time, days of 86400 s;
  // the values from memory, each checked here against its division by 86400).
  CHECK(days_of_date("1970-01-01") == 0);
  CHECK(days_of_date("2000-01-01") == 946684800 / 86400);
  CHECK(days_of_date("2024-01-01") == kTimeEpoch / 86400);
  CHECK(days_of_date("1900-01-01") == -2208988800LL / 86400);
  // Gregorian rule (every 4th year is a leap year, except centuries not divisible by 400):
  // 2000 and 2024 are leap years, 1900, 2100 and 2023 are not.
  CHECK(days_of_date("2000-02-29"));
  CHECK(days_of_date("2024-02-29"));
  CHECK_FALSE(days_of_date("1900-02-29"));
  CHECK_FALSE(days_of_date("2100-02-29"));
  CHECK_FALSE(days_of_date("2023-02-29"));
  CHECK(*days_of_date("2024-03-01") - *days_of_date("2024-02-28") == 2);
  CHECK(*days_of_date("2023-03-01") - *days_of_date("2023-02-28") == 1);
  for (const char* bad : {"2024-04-31", "2024-13-01", "2024-00-10", "2024-01-00", "2024-1-01",
                          "24-01-01", "2024/01/01", "1899-12-31", "2300-01-01", "", "2024-01-01x"})
    CHECK_FALSE(days_of_date(bad));
  // The inverse, over every day of the range.
  for (std::int64_t d = *days_of_date("1900-01-01"); d <= *days_of_date("2299-12-31"); ++d)
    REQUIRE(days_of_date(date_of_days(d)) == d);
  CHECK(date_of_days(0) == "1970-01-01");
  CHECK(date_of_days(*days_of_date("2024-02-29")) == "2024-02-29");
}

TEST_CASE("manifest provenance round trips; absent fields stay absent", "[manifest]") {
  Manifest m = hollin_manifest();
  REQUIRE(validate(m));
  auto back = parse_canonical_manifest(canonical_bytes(m));
  REQUIRE(back);
  CHECK(*back == m);
  CHECK(back->channels[3].serial.empty());
  CHECK(back->channels[3].calibrated_on.empty());
  CHECK(back->channels[1].calibrated_on == "2024-02-29");
  // Nothing known: the version 2 bytes hold one zero byte per station and channel and two
  // empty strings per channel more than version 1.
  Manifest bare = m;
  bare.latitude = bare.longitude = bare.elevation_m = std::nullopt;
  for (auto& c : bare.channels) c.depth_m.reset(), c.model.clear(), c.serial.clear();
  for (auto& c : bare.channels) c.calibrated_on.clear();
  CHECK(canonical_bytes(bare).size() == canonical_bytes(bare, 1).size() + 1 + 4 * 3);
  auto bare_back = parse_canonical_manifest(canonical_bytes(bare));
  REQUIRE(bare_back);
  CHECK(*bare_back == bare);
  CHECK_FALSE(bare_back->latitude);
  CHECK_FALSE(bare_back->channels[0].depth_m);
  // Version 1 bytes carry no provenance: the parse gives the bare manifest, and its v1
  // hash is the same for both.
  auto v1 = parse_canonical_manifest(canonical_bytes(m, 1), 1);
  REQUIRE(v1);
  CHECK(*v1 == bare);
  CHECK(manifest_hash(m, 1) == manifest_hash(bare, 1));
  // The version 2 hash follows every provenance field; a sensor above the surface is
  // negative depth and hashes differently from the same depth below.
  const std::uint32_t h = manifest_hash(m);
  auto differs = [&](auto edit) {
    Manifest x = m;
    edit(x);
    REQUIRE(validate(x));
    CHECK(manifest_hash(x) != h);
    auto again = parse_canonical_manifest(canonical_bytes(x));
    REQUIRE(again);
    CHECK(*again == x);
  };
  differs([](Manifest& x) { x.latitude = -47.26; });
  differs([](Manifest& x) { x.elevation_m.reset(); });
  differs([](Manifest& x) { x.channels[0].depth_m = -1.0; });
  differs([](Manifest& x) { x.channels[0].depth_m.reset(); });
  differs([](Manifest& x) { x.channels[2].model = "TF-4 fluorometer"; });
  differs([](Manifest& x) { x.channels[2].serial.clear(); });
  differs([](Manifest& x) { x.channels[3].calibrated_on = "2023-12-31"; });
  // Unknown field bits and dates outside the range are refused when parsing.
  auto bytes = canonical_bytes(m);
  bytes[17] |= 4;
  CHECK_FALSE(parse_canonical_manifest(bytes));
}

TEST_CASE("manifest provenance is validated, naming the field", "[manifest]") {
  const Manifest m = hollin_manifest();
  auto fails = [](const Manifest& x, const std::string& part) {
    auto r = validate(x);
    REQUIRE_FALSE(r);
    INFO(r.error().message);
    CHECK(r.error().message.find(part) != std::string::npos);
  };
  Manifest x = m;
  x.longitude.reset();
  fails(x, "together");
  x = m;
  x.latitude = 90.5;
  fails(x, "latitude");
  x = m;
  x.longitude = -180.01;
  fails(x, "longitude");
  x = m;
  x.elevation_m = std::nan("");
  fails(x, "elevation_m");
  x = m;
  x.channels[1].depth_m = 12000;
  fails(x, "channels[1].depth_m");
  x = m;
  x.channels[2].serial = std::string(256, 's');
  fails(x, "channels[2]: model and serial");
  x = m;
  x.channels[0].calibrated_on = "2023-02-29";
  fails(x, "channels[0].calibrated_on");
  x = m;
  x.latitude = 90;
  x.longitude = -180;
  x.channels[0].depth_m = -11000;  // the limits themselves are allowed
  CHECK(validate(x));
}

TEST_CASE("a version 2 manifest packet round trips; the parts carry the version", "[manifest]") {
  const CheckedManifest cm = checked(hollin_manifest());
  for (std::size_t mtu : {std::size_t(kMaxPacketBytes), std::size_t(40)}) {
    auto ps = encode_manifest(cm, 5, mtu);
    REQUIRE(ps);
    std::vector<ManifestPart> parts;
    for (auto& p : *ps) {
      CHECK((p.bytes[0] >> 4) == 2);
      auto d = decode_packet(p.bytes, nullptr);
      REQUIRE(d);
      parts.push_back(*d->manifest_part);
    }
    auto back = assemble_manifest(parts, cm.hash);
    REQUIRE(back);
    CHECK(*back == cm.manifest);
    // The same bytes read as version 1 do not parse as a manifest.
    CHECK_FALSE(assemble_manifest(parts, cm.hash, 1));
  }
}

TEST_CASE("alert kinds and stale causes round trip; bad pairs are refused", "[alerts]") {
  const CheckedManifest cm = checked(hollin_manifest());
  std::vector<AlertEvent> ev(4);
  ev[0] = {1, 2, "warning", 1, 31.42, 1717200600, "pc-bloom", AlertKind::change, StaleCause::none};
  ev[1] = ev[0];
  ev[1].kind = AlertKind::stale;
  ev[1].cause = StaleCause::all_failed_qc;
  ev[2] = ev[1];
  ev[2].cause = StaleCause::instrument_offline;
  ev[3] = ev[1];
  ev[3].kind = AlertKind::resumed;
  ev[3].cause = StaleCause::none;
  auto p = encode_alerts(cm, ev, 3);
  REQUIRE(p);
  auto d = decode_packet(*p, &cm);
  REQUIRE(d);
  REQUIRE(d->alerts.size() == 4);
  for (std::size_t i = 0; i < 4; ++i) {
    CHECK(d->alerts[i].kind == ev[i].kind);
    CHECK(d->alerts[i].cause == ev[i].cause);
    CHECK(d->alerts[i].rule_id == "pc-bloom");
  }
  auto refused = [&](AlertKind k, StaleCause c) {
    std::vector<AlertEvent> one{ev[0]};
    one[0].kind = k;
    one[0].cause = c;
    auto r = encode_alerts(cm, one, 3);
    REQUIRE_FALSE(r);
    CHECK(r.error().code == Errc::invalid_input);
  };
  refused(AlertKind::change, StaleCause::no_values);
  refused(AlertKind::stale, StaleCause::none);
  refused(AlertKind(3), StaleCause::none);
  refused(AlertKind::stale, StaleCause(4));
}

TEST_CASE("a version 1 alert packet decodes as before: every event a change", "[alerts]") {
  const CheckedManifest cm = checked(hollin_manifest());
  // Version 1 alerts section, built by hand from FORMAT.md §6.1 of version 1: one event,
  // channel 1, level 2 "w", previous 1, window index 0, statistic 3142 steps, rule "r".
  std::vector<std::uint8_t> p{0x10};
  put_u32le(p, cm.hash_v1);
  put_varint(p, 7);
  std::vector<std::uint8_t> body{0x01, 0x01, 0x02, 0x01, 'w', 0x01, 0x00};
  put_varint(body, zigzag(3142));
  body.insert(body.end(), {0x01, 'r'});
  p.push_back(4);
  put_varint(p, body.size());
  p.insert(p.end(), body.begin(), body.end());
  put_u32le(p, crc32c(p));
  auto d = decode_packet(p, &cm);
  INFO((d ? "" : d.error().message));
  REQUIRE(d);
  CHECK(d->header.version == 1);
  REQUIRE(d->alerts.size() == 1);
  CHECK(d->alerts[0].kind == AlertKind::change);
  CHECK(d->alerts[0].cause == StaleCause::none);
  CHECK(d->alerts[0].statistic == Approx(31.42));
  CHECK(d->alerts[0].window_start == kTimeEpoch);
}

TEST_CASE("cleaning records round trip on the channel's grid", "[cleanings]") {
  const CheckedManifest cm = checked(hollin_manifest());
  std::vector<CleaningRecord> cs{
      {0, 1717200000, 1717201800, 4.8174, 3.2049, 5, 5},
      {3, 1717200000, 1717200000, std::nullopt, 19.2004, 0, 3},
      {1, -2208988800, 10413792000, -0.004, std::nullopt, 255, 0},  // the time range's ends
  };
  auto p = encode_cleanings(cm, cs, 11, true);
  REQUIRE(p);
  auto d = decode_packet(*p, &cm);
  REQUIRE(d);
  CHECK(d->header.clock_unsynced);
  REQUIRE(d->cleanings.size() == 3);
  for (std::size_t i = 0; i < cs.size(); ++i) {
    const auto &a = d->cleanings[i], &b = cs[i];
    const double res = cm.manifest.channels[b.channel].resolution;
    CHECK(a.channel == b.channel);
    CHECK(a.maintenance_start == b.maintenance_start);
    CHECK(a.maintenance_end == b.maintenance_end);
    CHECK(a.n_before == b.n_before);
    CHECK(a.n_after == b.n_after);
    REQUIRE(a.before.has_value() == b.before.has_value());
    REQUIRE(a.after.has_value() == b.after.has_value());
    if (b.before) CHECK(std::fabs(*a.before - *b.before) <= res / 2 + 1e-12);
    if (b.after) CHECK(std::fabs(*a.after - *b.after) <= res / 2 + 1e-12);
  }
  CHECK(*d->cleanings[0].before == Approx(4.82));  // 4.8174 / 0.01 rounds to 482
  CHECK(*d->cleanings[1].after == Approx(19.200));
  // Cleaning records need the manifest.
  CHECK_FALSE(decode_packet(*p, nullptr));
  // Contract violations are refused with the record named.
  auto refused = [&](CleaningRecord c, const std::string& part) {
    auto r = encode_cleanings(cm, std::span(&c, 1), 1);
    REQUIRE_FALSE(r);
    INFO(r.error().message);
    CHECK(r.error().message.find("cleaning record 0") != std::string::npos);
    CHECK(r.error().message.find(part) != std::string::npos);
  };
  refused({4, 0, 0, 1.0, 1.0, 1, 1}, "channel");
  refused({0, 100, 99, 1.0, 1.0, 1, 1}, "maintenance_start <= maintenance_end");
  refused({0, 0, 10413792001, 1.0, 1.0, 1, 1}, "1900..2300");
  refused({0, 0, 1, 1.0, 1.0, 0, 1}, "exactly when");
  refused({0, 0, 1, std::nullopt, 1.0, 1, 1}, "exactly when");
  refused({0, 0, 1, std::nan(""), 1.0, 1, 1}, "before");
  refused({0, 0, 1, 1.0, 1e300, 1, 1}, "after");
}

TEST_CASE("statistics over not-evaluated samples when none passed (FORMAT.md §4.4)", "[stats]") {
  const Manifest m = hollin_manifest(60, 300);  // 5 slots
  const std::int64_t t0 = 1717200000;
  using F = Flag;
  // No passed sample, three not evaluated (one of them first), suspect and missing.
  ChannelWindow c =
      channel({F::suspect, F::not_evaluated, F::not_evaluated, F::missing, F::not_evaluated},
              {50, 2.0, 4.0, 0, 6.0});
  ChannelStats s = summarise(c, t0, 60);
  CHECK(s.basis == StatsBasis::not_evaluated);
  CHECK(*s.mean == Approx(4.0));
  CHECK(*s.min == 2.0);
  CHECK(*s.max == 6.0);
  CHECK(*s.sd == Approx(2.0));
  CHECK(*s.first_t == t0 + 60);
  CHECK(*s.last_t == t0 + 240);
  // The version 1 rule: passed samples only, so nothing.
  ChannelStats s1 = summarise(c, t0, 60, /*passed_only=*/true);
  CHECK(s1.basis == StatsBasis::used);
  CHECK_FALSE(s1.mean);
  CHECK(s1.counts == s.counts);
  // One passed sample is enough for the used basis; the not-evaluated ones stay out.
  ChannelWindow mixed = channel({F::pass, F::not_evaluated, F::not_evaluated, F::fail, F::pass},
                                {1.0, 100, 100, 100, 3.0});
  ChannelStats sm = summarise(mixed, t0, 60);
  CHECK(sm.basis == StatsBasis::used);
  CHECK(*sm.mean == 2.0);
  // Suspect and failed samples alone give no statistics under either basis.
  ChannelWindow bad =
      channel({F::suspect, F::fail, F::missing, F::suspect, F::fail}, {1.0, 2.0, 0, 3.0, 4.0});
  ChannelStats sb = summarise(bad, t0, 60);
  CHECK(sb.basis == StatsBasis::used);
  CHECK_FALSE(sb.mean);

  // Through the codec: samples packets (the decoder derives the statistics) and
  // statistics-only packets.
  const CheckedManifest cm = checked(m);
  Window w;
  w.start = t0;
  w.slots = 5;
  w.channels = {c, mixed, bad,
                channel({F::not_evaluated, F::not_evaluated, F::not_evaluated, F::not_evaluated,
                         F::not_evaluated},
                        {19.1, 19.2, 19.3, 19.4, 19.5})};
  for (auto& ch : w.channels) ch.stats = summarise(ch, t0, 60);
  for (bool stats_only : {false, true}) {
    EncodeOptions o;
    o.stats_only = stats_only;
    auto ps = encode_windows(cm, std::span(&w, 1), 1, o);
    REQUIRE(ps);
    REQUIRE(ps->size() == 1);
    auto d = decode_packet(ps->front().bytes, &cm);
    REQUIRE(d);
    const auto& got = d->windows.at(0).channels;
    INFO("stats_only " << stats_only);
    CHECK(got[0].stats.basis == StatsBasis::not_evaluated);
    CHECK(*got[0].stats.mean == Approx(4.0));
    CHECK(*got[0].stats.first_t == t0 + 60);
    CHECK(*got[0].stats.last_t == t0 + 240);
    CHECK(got[1].stats.basis == StatsBasis::used);
    CHECK(*got[1].stats.mean == Approx(2.0));
    CHECK_FALSE(got[2].stats.mean);
    CHECK(got[3].stats.basis == StatsBasis::not_evaluated);
    CHECK(*got[3].stats.mean == Approx(19.3));
    CHECK(*got[3].stats.sd == Approx(0.158).margin(0.001));  // sd of 19.1..19.5 step 0.1
    if (stats_only) continue;
    // The same samples packet as version 1 (its windows section is the same bytes):
    // the samples are the same, the statistics follow the version 1 rule.
    auto d1 = decode_packet(as_version1(ps->front().bytes, cm), &cm);
    REQUIRE(d1);
    CHECK(d1->header.version == 1);
    const auto& old = d1->windows.at(0).channels;
    CHECK(old[0].values == got[0].values);
    CHECK(old[0].flags == got[0].flags);
    CHECK_FALSE(old[0].stats.mean);
    CHECK(old[0].stats.basis == StatsBasis::used);
    CHECK(old[1].stats == got[1].stats);
  }
  // The encoder refuses a basis that breaks the rule.
  Window x = w;
  x.channels[1].stats.basis = StatsBasis::not_evaluated;
  EncodeOptions o;
  o.stats_only = true;
  auto r = encode_windows(cm, std::span(&x, 1), 1, o);
  REQUIRE_FALSE(r);
  CHECK(r.error().message.find("basis") != std::string::npos);
  x = w;
  x.channels[0].stats = summarise(x.channels[0], t0, 60, true);  // v1 statistics: no mean
  r = encode_windows(cm, std::span(&x, 1), 1, o);
  REQUIRE_FALSE(r);
  CHECK(r.error().message.find("basis") != std::string::npos);
}

TEST_CASE("flag 9 means no value: the encoder holds the rule both ways", "[encoder]") {
  const Manifest m = hollin_manifest(60, 120);  // 2 slots
  const CheckedManifest cm = checked(m);
  Window w;
  w.start = 1717200000;
  w.slots = 2;
  for (std::size_t c = 0; c < 4; ++c)
    w.channels.push_back(channel({Flag::pass, Flag::pass}, {1, 2}));
  REQUIRE(encode_windows(cm, std::span(&w, 1), 1));
  Window a = w;
  a.channels[2].flags[1] = Flag::missing;  // flag 9 with a value
  auto r = encode_windows(cm, std::span(&a, 1), 1);
  REQUIRE_FALSE(r);
  CHECK(r.error().message.find("flag is not 9") != std::string::npos);
  Window b = w;
  b.channels[2].values[0].reset();  // flag 1 without a value
  for (Flag f : {Flag::pass, Flag::not_evaluated, Flag::suspect, Flag::fail}) {
    b.channels[2].flags[0] = f;
    r = encode_windows(cm, std::span(&b, 1), 1);
    REQUIRE_FALSE(r);
    CHECK(r.error().message.find("channel 'pe' slot 0") != std::string::npos);
  }
  // The decoder gives a value to every slot not flagged 9 and to no other.
  b.channels[2].flags[0] = Flag::missing;
  auto ps = encode_windows(cm, std::span(&b, 1), 1);
  REQUIRE(ps);
  auto d = decode_packet(ps->front().bytes, &cm);
  REQUIRE(d);
  for (const auto& ch : d->windows[0].channels)
    for (std::size_t i = 0; i < ch.flags.size(); ++i)
      CHECK(ch.values[i].has_value() == (ch.flags[i] != Flag::missing));
}
