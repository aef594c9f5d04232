// Windows rebuilt from archived samples (a resend beyond the outbox's
// retention): slots, flags, partial and clock marks, statistics, and a round
// trip through the codec. The series is invented for the test; the expected
// statistics are worked out by hand below from FORMAT.md §4.4's definition
// (mean, min, max over passed samples).
#include <catch2/catch.hpp>

#include "codec/decoder.h"
#include "codec/encoder.h"
#include "config/settings/reasons.h"
#include "daemon/core/archive_windows.h"

using namespace tarn;
using store::ArchivedSample;
using PF = codec::Flag;

namespace {

codec::Manifest manifest() {
  codec::Manifest m;
  m.station = "hollin-buoy-1";
  m.period_s = 60;
  m.window_s = 600;
  auto channel = [](const char* name, const char* quantity, const char* unit, double resolution,
                    const char* instrument) {
    codec::ManifestChannel c;
    c.name = name;
    c.quantity = quantity;
    c.unit = unit;
    c.resolution = resolution;
    c.instrument = instrument;
    return c;
  };
  m.channels = {channel("chla", "chlorophyll-a", "ug/L", 0.01, "fluorometer"),
                channel("temp", "water temperature", "Cel", 0.001, "probe")};

  return m;
}

constexpr std::int64_t W = 1796188800;  // a multiple of 600

}  // namespace

TEST_CASE("archive windows: slots, flags, partial, clock mark, statistics", "[resend]") {
  std::vector<ArchivedSample> s;
  for (int i = 0; i < 10; ++i) {
    PF f = i == 3 ? PF::suspect : i == 5 ? PF::missing : PF::pass;
    s.push_back({"chla", W + 60 * i, 3.0 + 0.1 * i, f, i == 3 ? pipeline::reason::spike : 0u});
  }
  for (int i = 0; i < 8; ++i) s.push_back({"temp", W + 60 * i, 15.0 + 0.01 * i, PF::pass, 0});
  s.push_back({"chla", W + 600, 2.5, PF::pass, pipeline::reason::clock_unsynced});
  s.push_back({"gone", W + 60, 1.0, PF::pass, 0});   // a channel no longer in the manifest
  s.push_back({"chla", W - 60, 9.0, PF::pass, 0});   // before the range's first window
  s.push_back({"chla", W + 60, 99.0, PF::pass, 0});  // a second sample for slot 1: ignored

  auto ws = daemon::windows_from_archive(manifest(), W + 30, W + 1200, s);
  REQUIRE(ws.size() == 2);
  const codec::Window& a = ws[0];
  CHECK(a.start == W);
  CHECK(a.slots == 10);
  CHECK(a.partial);  // temp has no archived sample in slots 8 and 9
  CHECK_FALSE(a.clock_unsynced);
  REQUIRE(a.channels.size() == 2);
  const auto& chla = a.channels[0];
  CHECK(chla.flags[3] == codec::Flag::suspect);
  CHECK(chla.reasons[3] == pipeline::reason::spike);
  CHECK(chla.flags[5] == codec::Flag::missing);
  CHECK_FALSE(chla.values[5]);            // a missing slot carries no value on the wire
  CHECK(*chla.values[1] == Approx(3.1));  // the first sample of the slot, not 99
  // Passed: slots 0,1,2,4,6,7,8,9 -> 3.0 3.1 3.2 3.4 3.6 3.7 3.8 3.9, sum 27.7.
  CHECK(chla.stats.counts == std::array<std::uint32_t, 5>{8, 0, 1, 0, 1});
  CHECK(*chla.stats.mean == Approx(27.7 / 8));
  CHECK(*chla.stats.min == Approx(3.0));
  CHECK(*chla.stats.max == Approx(3.9));
  const auto& temp = a.channels[1];
  CHECK(temp.flags[8] == codec::Flag::missing);
  CHECK(temp.flags[9] == codec::Flag::missing);
  CHECK(temp.stats.counts[0] == 8);
  CHECK(temp.reasons.empty());  // no reason bit anywhere: sent as all zero

  const codec::Window& b = ws[1];
  CHECK(b.start == W + 600);
  CHECK(b.clock_unsynced);
  CHECK(b.partial);
  CHECK(b.channels[1].stats.counts[4] == 10);  // temp: nothing archived, every slot missing

  // The rebuilt windows encode and decode back to themselves.
  auto cm = codec::check_manifest(manifest());
  REQUIRE(cm.ok());
  auto packets = codec::encode_windows(*cm, ws, 500);
  REQUIRE(packets.ok());
  std::vector<codec::Window> back;
  for (auto& p : *packets) {
    auto d = codec::decode_packet(p.bytes, &*cm);
    REQUIRE(d.ok());
    for (auto& w : d->windows) back.push_back(w);
  }
  REQUIRE(back.size() == 2);
  CHECK(back[0].channels[0].flags == chla.flags);
  CHECK(back[0].partial);
  CHECK(back[1].clock_unsynced);
}

TEST_CASE("archive windows: nothing archived gives no window", "[resend]") {
  CHECK(daemon::windows_from_archive(manifest(), W, W + 6000, {}).empty());
}

TEST_CASE("place_samples: UTC-aligned windows, slot by time, first sample of a slot stays",
          "[resend][encode]") {
  // Expected positions worked out by hand from the rule in archive_windows.h:
  // start = floor(t / 600) * 600, slot = (t - start) / 60.
  std::vector<daemon::SlotSample> in = {
      {W + 125, 1, 15.5, PF::pass, 0},               // off the grid: slot 2 of window W
      {W + 120, 1, 16.0, PF::suspect, 0},            // the same slot again: a duplicate
      {W - 1, 0, 3.0, PF::pass, 0},                  // the last slot of the window before W
      {W + 600, 0, std::nullopt, PF::missing, 7u}};  // first slot of the window after W
  auto placed = daemon::place_samples(manifest(), in);
  REQUIRE(placed.windows.size() == 3);
  CHECK(placed.windows[0].window.start == W - 600);
  CHECK(placed.windows[1].window.start == W);
  CHECK(placed.windows[2].window.start == W + 600);
  REQUIRE(placed.duplicates.size() == 1);
  CHECK(placed.duplicates[0] == std::pair<std::size_t, std::size_t>{1, 0});

  const auto& before = placed.windows[0];
  CHECK(before.window.channels.size() == 2);  // every manifest channel
  CHECK(before.window.channels[0].values[9] == 3.0);
  CHECK(before.filled[0][9]);
  CHECK_FALSE(before.filled[0][8]);
  CHECK(before.window.channels[0].flags[8] == PF::missing);
  CHECK_FALSE(before.window.channels[0].values[8].has_value());

  const auto& w = placed.windows[1].window;
  CHECK(w.channels[1].values[2] == 15.5);  // the first sample stays
  CHECK(w.channels[1].flags[2] == PF::pass);
  CHECK(w.channels[0].reasons.size() == 10);  // one entry per slot, zero when empty

  const auto& after = placed.windows[2];
  CHECK(after.filled[0][0]);
  CHECK(after.window.channels[0].flags[0] == PF::missing);
  CHECK(after.window.channels[0].reasons[0] == 7u);
}
