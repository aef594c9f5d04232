// WindowAssembler with maintenance of one instrument: the cleaning step of
// that instrument's channels comes out (and through the codec), the other
// instrument's record is not flagged; a stale alert level comes out with its
// cause. Simulated time: the test passes every timestamp in. The series are
// invented for the test; the station sits at the project's invented point.
#include <catch2/catch.hpp>

#include <algorithm>
#include <string>

#include "codec/decoder.h"
#include "codec/encoder.h"
#include "config/settings/reasons.h"
#include "daemon/core/config_check.h"
#include "daemon/core/manifest_json.h"
#include "daemon/core/window_assembler.h"

namespace pl = tarn::pipeline;
using tarn::daemon::AssemblerOutput;
using tarn::daemon::WindowAssembler;

namespace {

constexpr std::int64_t t0 = 1785542400;  // 2026-08-01T00:00:00Z, a multiple of 600

// Two instruments: a fluorometer (chla, pc) and a probe (temp). chla and temp
// have no QC tests (flag 2, not evaluated, still usable for the cleaning
// medians); pc has a gross range test, since alert rules take checked samples
// only. One alert rule on pc with stale_windows 2.
const char* kConfig = R"({
  "station": { "id": "assembler-test", "latitude": 55.10, "longitude": 3.60 },
  "sampling": { "period_s": 60, "window_s": 600 },
  "lines": [ { "name": "optics", "port": "/dev/ttyUSB0" }, { "name": "wire", "port": "/dev/ttyUSB1" } ],
  "instruments": [
    { "name": "fluorometer", "line": "optics", "driver": "line",
      "options": { "poll": "MEAS\r\n", "delimiter": "," },
      "channels": [
        { "name": "chla", "quantity": "chlorophyll_a", "unit": "ug/L", "resolution": 0.01, "source": { "field": 1 } },
        { "name": "pc", "quantity": "phycocyanin", "unit": "ug/L", "resolution": 0.01, "source": { "field": 2 },
          "qc": [ { "kind": "gross_range", "sensor_min": 0, "sensor_max": 200, "operator_min": 0, "operator_max": 100 } ] } ] },
    { "name": "probe", "line": "wire", "driver": "line",
      "options": { "poll": "T\r\n", "delimiter": "," },
      "channels": [
        { "name": "temp", "quantity": "water_temperature", "unit": "Cel", "resolution": 0.01, "source": { "field": 1 } } ] } ],
  "alerts": { "rules": [ { "name": "bloom", "channel": "pc", "statistic": "mean", "stale_windows": 2,
    "levels": [ { "name": "high", "threshold": 5 } ] } ] },
  "uplink": { "backend": "mqtt", "options": { "host": "127.0.0.1", "port": 1883 } }
})";

struct Rig {
  tarn::config::StationConfig cfg;
  tarn::codec::Manifest manifest;
  Rig() {
    auto res = tarn::daemon::load_and_check_text(kConfig, "t.json");
    INFO(res.problems.render("t.json"));
    REQUIRE(res.config);
    cfg = *res.config;
    auto m = tarn::daemon::manifest_of_config(cfg);
    REQUIRE(m);
    manifest = *m;
  }
};

// One poll of every channel at t: chla, pc and temp values (empty = no
// value, with the driver's reason `gone`).
void poll(WindowAssembler& a, std::int64_t t, std::optional<double> chla, std::optional<double> pc,
          std::optional<double> temp, AssemblerOutput& out,
          std::uint32_t gone = pl::reason::no_reply) {
  a.advance(t, out);
  a.push(0, {t, chla, chla ? 0u : gone}, out);
  a.push(1, {t, pc, pc ? 0u : gone}, out);
  a.push(2, {t, temp, temp ? 0u : gone}, out);
}

}  // namespace

TEST_CASE("maintenance of one instrument: its cleaning step comes out, the others are not flagged",
          "[assembler][maintenance]") {
  Rig rig;
  WindowAssembler a(rig.cfg, rig.manifest);
  AssemblerOutput out;
  a.start(t0, out);
  std::int64_t t = t0;
  // 10 polls with a fouled reading: chla 4.0 .. 4.9 (median of the last 5:
  // 4.5, 4.6, 4.7, 4.8, 4.9 -> 4.7), pc 3.0 flat.
  for (int i = 0; i < 10; ++i, t += 60) poll(a, t, 4.0 + 0.1 * i, 3.0, 18.0, out);
  const std::int64_t began = t;
  a.set_maintenance(began, {"fluorometer"});
  CHECK(a.channel_in_maintenance(0));
  CHECK(a.channel_in_maintenance(1));
  CHECK_FALSE(a.channel_in_maintenance(2));
  for (int i = 0; i < 3; ++i, t += 60) poll(a, t, 9.0, 9.0, 18.0, out);  // wiping the optics
  const std::int64_t ended = t;
  a.set_maintenance(ended, {});
  // After cleaning: chla 2.0, 2.1, ... (first 5: median 2.2), pc 3.0.
  for (int i = 0; i < 8; ++i, t += 60) poll(a, t, 2.0 + 0.1 * i, 3.0, 18.0, out);
  a.settle_held(out);

  // The polls during maintenance: fluorometer channels flag 4 with reason
  // maintenance; the probe's not.
  for (auto& s : out.samples) {
    if (s.sample.t < began || s.sample.t >= ended) continue;
    INFO("channel " << s.channel << " t " << s.sample.t);
    const bool flagged = (s.sample.reasons & pl::reason::maintenance) != 0;
    CHECK(flagged == (s.channel != 2));
    if (flagged) CHECK(s.sample.flag == tarn::codec::Flag::fail);
  }

  REQUIRE(out.cleanings.size() == 2);
  std::sort(out.cleanings.begin(), out.cleanings.end(),
            [](auto& x, auto& y) { return x.channel < y.channel; });
  const auto& chla = out.cleanings[0];
  CHECK(chla.channel == 0);
  CHECK(chla.maintenance_start == began);
  CHECK(chla.maintenance_end == ended);
  REQUIRE(chla.before);
  REQUIRE(chla.after);
  CHECK(*chla.before == Approx(4.7));
  CHECK(*chla.after == Approx(2.2));
  CHECK(chla.n_before == 5);
  CHECK(chla.n_after == 5);
  CHECK(out.cleanings[1].channel == 1);
  CHECK(*out.cleanings[1].before == Approx(3.0));
  CHECK(*out.cleanings[1].after == Approx(3.0));

  // Through the codec as the station sends them, and back.
  auto cm = tarn::codec::check_manifest(rig.manifest);
  REQUIRE(cm);
  auto bytes = tarn::codec::encode_cleanings(*cm, out.cleanings, 7);
  REQUIRE(bytes);
  auto d = tarn::codec::decode_packet(*bytes, &*cm);
  REQUIRE(d);
  REQUIRE(d->cleanings.size() == 2);
  CHECK(d->cleanings[0].maintenance_start == began);
  CHECK(*d->cleanings[0].before == Approx(4.7).margin(0.005));  // resolution 0.01
  CHECK(*d->cleanings[0].after == Approx(2.2).margin(0.005));
}

TEST_CASE("a raised level without values goes stale with its cause, and resumes",
          "[assembler][alerts]") {
  Rig rig;
  WindowAssembler a(rig.cfg, rig.manifest);
  AssemblerOutput out;
  a.start(t0, out);
  std::int64_t t = t0;
  // Two windows of pc 8 (above 5): the level rises.
  for (int i = 0; i < 20; ++i, t += 60) poll(a, t, 2.0, 8.0, 18.0, out);
  // Three windows in which the fluorometer's port is gone.
  for (int i = 0; i < 30; ++i, t += 60)
    poll(a, t, std::nullopt, std::nullopt, 18.0, out, pl::reason::offline);
  a.advance(t, out);
  // While stale, the assembler says so (tarn status).
  CHECK(a.alert_stale_causes() == std::vector<std::string>{"instrument_offline"});
  // Values again.
  for (int i = 0; i < 20; ++i, t += 60) poll(a, t, 2.0, 8.0, 18.0, out);
  a.advance(t + 600, out);

  auto find = [&](pl::AlertChange c) {
    return std::find_if(out.alerts.begin(), out.alerts.end(),
                        [&](const pl::AlertEvent& e) { return e.change == c; });
  };
  auto raised = find(pl::AlertChange::raised);
  REQUIRE(raised != out.alerts.end());
  auto stale = find(pl::AlertChange::stale);
  REQUIRE(stale != out.alerts.end());
  CHECK(stale->to_name == "high");  // the level stands
  CHECK(stale->window_start > raised->window_start);
  CHECK(stale->stale_cause == pl::StaleCause::instrument_offline);
  auto resumed = find(pl::AlertChange::resumed);
  REQUIRE(resumed != out.alerts.end());
  CHECK(resumed->window_start > stale->window_start);
  // Confirmed again: not stale.
  CHECK(a.alert_stale_causes() == std::vector<std::string>{""});
}
