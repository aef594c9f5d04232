// Config parsed once: the whole check (daemon/core/config_check.h) keeps
// what each reader read, typed, with the config; the code that runs takes
// those settings and never reads a block again. These tests hold the typed
// settings against the readers' own results and the blocks' values, and show
// that a block the running code used to read with its problems thrown away
// (the store block) is now refused by the check.
#include <catch2/catch.hpp>

#include <stdexcept>
#include <string>

#include "config/pipeline_config.h"
#include "config/settings/reasons.h"
#include "daemon/core/config_check.h"
#include "daemon/core/health.h"
#include "daemon/core/maintenance_book.h"
#include "daemon/store/store_config.h"
#include "daemon/uplink/link_policy.h"
#include "drivers/calibration_config.h"
#include "drivers/driver.h"

using tarn::config::Json;
using tarn::config::Problems;
namespace cfg = tarn::config;
namespace pl = tarn::pipeline;

namespace {

// The invented hollin-jetty station (55.10 N 3.60 E): one fluorometer with
// two channels, QC on chla, an alert on pc, and every optional block set to
// a value other than its default, so that a default cannot pass for a read value.
Json station() {
  return Json::parse(R"({
    "station": { "id": "hollin-jetty", "latitude": 55.10, "longitude": 3.60 },
    "sampling": { "period_s": 60, "window_s": 600 },
    "lines": [ { "name": "optics", "port": "/dev/ttyUSB0" } ],
    "instruments": [ {
      "name": "fluorometer", "line": "optics", "driver": "line", "period_s": 120,
      "options": { "poll": "MEAS\r\n", "delimiter": "," },
      "channels": [
        { "name": "chla", "quantity": "chlorophyll_a", "unit": "ug/L", "resolution": 0.01,
          "source": { "field": 1 },
          "calibration": { "kind": "linear", "gain": 2, "offset": -1 },
          "qc": [ { "kind": "gross_range", "sensor_min": 0, "sensor_max": 400 },
                  { "kind": "spike", "suspect_threshold": 5, "fail_threshold": 15 } ],
          "window": { "median": true, "min_pass_fraction": 0.25 } },
        { "name": "pc", "quantity": "phycocyanin", "unit": "ug/L", "resolution": 0.01,
          "source": { "field": 2 } }
      ] } ],
    "alerts": { "rules": [ { "name": "cyano", "channel": "pc", "accept_doubts": ["spike"],
                             "levels": [ { "name": "watch", "threshold": 10,
                                           "conditions": [ { "channel": "chla",
                                                             "compare": "below" } ] } ] } ] },
    "store": { "budget_mb": 32, "when_full": "thin_archive_first" },
    "health": { "interval_s": 600, "clock_sync": "assume_synchronised" },
    "maintenance": { "max_duration_s": 600 },
    "uplink": { "backend": "mqtt", "options": { "host": "127.0.0.1", "port": 1883 },
                "policy": { "mode": "scheduled", "interval_min": 30 } }
  })");
}

cfg::LoadResult check(const Json& j) {
  return tarn::daemon::load_and_check_text(j.dump(), "t.json");
}

}  // namespace

TEST_CASE("the check keeps the pipeline settings it read, equal to the readers' results") {
  auto res = check(station());
  INFO(res.problems.render("t.json"));
  REQUIRE(res.problems.empty());
  REQUIRE(res.config);
  const cfg::StationConfig& c = *res.config;
  const auto& in = c.instruments[0];
  Problems p;
  for (const auto& ch : in.channels) {
    const pl::ChannelConfig want = cfg::read_channel_pipeline(c, in, ch, p);
    CHECK(ch.pipeline.name == want.name);
    CHECK(ch.pipeline.qc.poll_interval_s == want.qc.poll_interval_s);
    CHECK(ch.pipeline.qc.tests.size() == want.qc.tests.size());
    CHECK(ch.pipeline.window.window_s == want.window.window_s);
    CHECK(ch.pipeline.window.median == want.window.median);
    CHECK(ch.pipeline.window.min_pass_fraction == want.window.min_pass_fraction);
    CHECK(ch.pipeline.window.alert_masks == want.window.alert_masks);
  }
  CHECK(p.empty());
  // The values themselves, from the block above.
  const pl::ChannelConfig& chla = in.channels[0].pipeline;
  CHECK(chla.name == "chla");
  CHECK(chla.qc.poll_interval_s == 120);  // the instrument's period, not the station's
  REQUIRE(chla.qc.tests.size() == 2);
  CHECK(std::get<pl::SpikeParams>(chla.qc.tests[1]).fail_threshold == 15);
  CHECK(chla.window.median);
  CHECK(chla.window.min_pass_fraction == 0.25);
  // chla is read by the rule's condition, pc by the rule: both keep the rule's mask.
  CHECK(chla.window.alert_masks == std::vector<std::uint32_t>{pl::reason::spike});
  CHECK(in.channels[1].pipeline.window.alert_masks ==
        std::vector<std::uint32_t>{pl::reason::spike});
  REQUIRE(c.alert_rules.size() == 1);
  CHECK(c.alert_rules[0].name == "cyano");
  CHECK(c.alert_rules[0].accept_doubts == pl::reason::spike);
  CHECK(c.alert_rules[0].levels.at(0).conditions.size() == 1);
}

TEST_CASE("the check keeps each owner's settings, read from its block") {
  auto res = check(station());
  INFO(res.problems.render("t.json"));
  REQUIRE(res.config);
  const cfg::OwnerSettings& s = res.config->settings;
  CHECK(s.get<tarn::daemon::MaintenanceOptions>().max_duration_s == 600);
  CHECK(s.get<tarn::daemon::HealthOptions>().interval_s == 600);
  CHECK(s.get<tarn::daemon::HealthOptions>().clock_sync == "assume_synchronised");
  CHECK(s.get<tarn::uplink::LinkPolicyConfig>().scheduled);
  CHECK(s.get<tarn::uplink::LinkPolicyConfig>().interval_min == 30);
  const auto& store = s.get<tarn::store::StationStoreOptions>();
  CHECK(store.limits.budget_bytes == 32ll << 20);
  CHECK(store.limits.policy == tarn::store::BudgetPolicy::thin_archive_first);
  // The driver's: the calibrations in channel order (chla linear 2x - 1, pc identity).
  const auto& cals = tarn::drivers::calibrations_of(res.config->instruments[0]);
  REQUIRE(cals.size() == 2);
  REQUIRE(std::holds_alternative<tarn::protocol::calibration::Linear>(cals[0]));
  CHECK(std::get<tarn::protocol::calibration::Linear>(cals[0]).gain == 2);
  CHECK(std::holds_alternative<tarn::protocol::calibration::Identity>(cals[1]));
}

TEST_CASE("a config that did not go through the check has no settings to run") {
  // load_text reads the core only: the owners' settings are not there, and
  // asking for them is an error, never a default passed off as the config's.
  auto res = cfg::load_text(station().dump(), "t.json");
  REQUIRE(res.problems.empty());
  REQUIRE(res.config);
  CHECK_FALSE(res.config->settings.has<tarn::daemon::MaintenanceOptions>());
  CHECK_THROWS_AS(res.config->settings.get<tarn::daemon::MaintenanceOptions>(), std::logic_error);
  const auto& in = res.config->instruments[0];
  const auto* f = tarn::drivers::find_driver(in.driver);
  REQUIRE(f);
  CHECK_THROWS_AS(f->create(in, res.config->lines[0]), std::logic_error);
  // Checked, the same instrument gives a driver.
  auto ok = check(station());
  REQUIRE(ok.config);
  CHECK(f->create(ok.config->instruments[0], ok.config->lines[0]) != nullptr);
}

TEST_CASE("the check refuses a bad store block, which the running code used to ignore") {
  // Before, the store block was read only when the store opened, with its
  // problems thrown away: a typo or a bad value ran on the defaults.
  Json j = station();
  j["store"] = Json::parse(R"({"budget_mb": 0, "budgt_mb": 3})");
  auto res = check(j);
  CHECK_FALSE(res.config);
  const std::string all = res.problems.render("t.json");
  INFO(all);
  CHECK(res.problems.size() == 2);
  CHECK(all.find("t.json: /store/budget_mb: ") != std::string::npos);
  CHECK(all.find("t.json: /store/budgt_mb: ") != std::string::npos);
}
