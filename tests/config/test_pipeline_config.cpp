// config/pipeline_config: the QC, window and alert blocks of the station config
// mapped to the pipeline's structs, and every mistake named by its JSON pointer.
#include <catch2/catch.hpp>

#include <string>
#include <variant>

#include "config/pipeline_config.h"
#include "config/settings/reasons.h"
#include "daemon/core/config_check.h"
#include "daemon/pipeline/alert_rules.h"
#include "daemon/pipeline/channel_pipeline.h"

using tarn::config::Json;
using tarn::config::Problems;
namespace pl = tarn::pipeline;
namespace cfg = tarn::config;

namespace {

// A small valid station (the invented hollin-jetty on the invented Lake
// Hollin): one fluorometer, chla and pc, no QC yet.
Json base() {
  return Json::parse(R"({
    "station": { "id": "hollin-jetty", "latitude": 55.08, "longitude": 3.62 },
    "sampling": { "period_s": 60, "window_s": 600 },
    "lines": [ { "name": "optics", "port": "/dev/ttyUSB0" } ],
    "instruments": [ {
      "name": "fluorometer", "line": "optics", "driver": "line",
      "options": { "poll": "MEAS\r\n", "delimiter": "," },
      "channels": [
        { "name": "chla", "quantity": "chlorophyll_a", "unit": "ug/L", "resolution": 0.01, "source": { "field": 1 } },
        { "name": "pc", "quantity": "phycocyanin", "unit": "ug/L", "resolution": 0.01, "source": { "field": 2 } }
      ] } ],
    "uplink": { "backend": "mqtt", "options": { "host": "127.0.0.1", "port": 1883 } }
  })");
}

Json& chla(Json& root) {
  return root["instruments"][0]["channels"][0];
}
Json& pc(Json& root) {
  return root["instruments"][0]["channels"][1];
}

cfg::StationConfig load(const Json& root) {
  auto res = cfg::load_text(root.dump(), "t.json");
  INFO(res.problems.render("t.json"));
  REQUIRE(res.problems.empty());
  REQUIRE(res.config);
  return *res.config;
}

Problems validate(const Json& root) {
  Problems p;
  cfg::validate_pipeline(load(root), p);
  return p;
}

bool names(const Problems& p, const std::string& pointer) {
  for (const auto& x : p.list())
    if (x.where == pointer) return true;
  return false;
}

const std::string kChla = "/instruments/0/channels/0";

}  // namespace

TEST_CASE("a full QC, window and alert block maps to the pipeline structs") {
  Json root = base();
  root["instruments"][0]["period_s"] = 30;
  chla(root)["qc"] = Json::parse(R"([
    { "kind": "timing", "late_s": 5, "max_fill": 40 },
    { "kind": "instrument_status", "fail_on": ["garbled", "offline"], "suspect_on": ["warming_up", "clock_unsynced"] },
    { "kind": "gross_range", "sensor_min": 0, "sensor_max": 400, "operator_max": 150 },
    { "kind": "climatology", "ranges": [ { "month": 7, "min": 0, "max": 120 }, { "month": 1, "min": 0.5, "max": 20 } ] },
    { "kind": "spike", "suspect_threshold": 5, "fail_threshold": 15 },
    { "kind": "rate_of_change", "n_dev": 2.5, "period_s": 90000, "min_count": 30 },
    { "kind": "flat_line", "suspect_count": 4, "fail_count": 9, "tolerance": 0.005 },
    { "kind": "attenuated_signal", "period_s": 43200, "measure": "sd", "fail_below": 0.02, "min_count": 60 },
    { "kind": "solar_quenching", "suspect_above_deg": 25 },
    { "kind": "fouling_drift", "max_rise": 2, "night_below_deg": -12, "min_night_samples": 20 }
  ])");
  chla(root)["window"] = Json::parse(
      R"({ "include_suspect": true, "median": true, "min_pass_fraction": 0.75, "max_empty_windows": 12 })");
  root["alerts"] = Json::parse(R"({ "rules": [ {
    "name": "cyano", "channel": "pc", "statistic": "max",
    "levels": [
      { "name": "watch", "threshold": 3.4, "conditions": [ { "channel": "chla", "statistic": "median", "compare": "below" } ] },
      { "name": "warning", "threshold": 6.7, "conditions": [ { "channel": "chla", "compare": "above", "value": 1.5 } ] }
    ],
    "hysteresis": 0.8, "raise_windows": 2, "clear_windows": 3, "renotify_s": 21600, "min_count": 4 } ] })");
  const cfg::StationConfig c = load(root);
  Problems p;
  cfg::validate_pipeline(c, p);
  INFO(p.render("t.json"));
  REQUIRE(p.empty());

  const auto& in = c.instruments[0];
  pl::ChannelConfig ch = cfg::read_channel_pipeline(c, in, in.channels[0], p);
  REQUIRE(p.empty());
  CHECK(ch.name == "chla");
  CHECK(ch.qc.poll_interval_s == 30);  // the instrument's period wins over the station's
  REQUIRE(ch.qc.location);
  CHECK(ch.qc.location->latitude_deg == 55.08);
  CHECK(ch.qc.location->longitude_deg == 3.62);
  REQUIRE(ch.qc.tests.size() == 10);
  // The order of the file is kept.
  const char* kinds[] = {"timing",          "instrument_status", "gross_range", "climatology",
                         "spike",           "rate_of_change",    "flat_line",   "attenuated_signal",
                         "solar_quenching", "fouling_drift"};
  for (std::size_t i = 0; i < 10; ++i) CHECK(pl::test_kind(ch.qc.tests[i]) == kinds[i]);

  auto& t = std::get<pl::TimingParams>(ch.qc.tests[0]);
  CHECK(t.late_s == 5);
  CHECK(t.max_fill == 40);
  auto& s = std::get<pl::InstrumentStatusParams>(ch.qc.tests[1]);
  CHECK(s.fail_on == (pl::reason::garbled | pl::reason::offline));
  CHECK(s.suspect_on == (pl::reason::warming_up | pl::reason::clock_unsynced));
  auto& g = std::get<pl::GrossRangeParams>(ch.qc.tests[2]);
  CHECK(g.sensor_min == 0);
  CHECK(g.sensor_max == 400);
  CHECK_FALSE(g.operator_min);
  CHECK(g.operator_max == 150.0);
  auto& cl = std::get<pl::ClimatologyParams>(ch.qc.tests[3]);
  REQUIRE(cl.ranges.size() == 2);
  CHECK(cl.ranges[0].month == 7);
  CHECK(cl.ranges[0].max == 120);
  CHECK(cl.ranges[1].month == 1);
  CHECK(cl.ranges[1].min == 0.5);
  auto& sp = std::get<pl::SpikeParams>(ch.qc.tests[4]);
  CHECK(sp.suspect_threshold == 5);
  CHECK(sp.fail_threshold == 15);
  auto& rc = std::get<pl::RateOfChangeParams>(ch.qc.tests[5]);
  CHECK(rc.n_dev == 2.5);
  CHECK(rc.period_s == 90000);
  CHECK(rc.min_count == 30);
  auto& fl = std::get<pl::FlatLineParams>(ch.qc.tests[6]);
  CHECK(fl.suspect_count == 4);
  CHECK(fl.fail_count == 9);
  CHECK(fl.tolerance == 0.005);
  auto& at = std::get<pl::AttenuatedSignalParams>(ch.qc.tests[7]);
  CHECK(at.period_s == 43200);
  CHECK(at.measure == pl::VariationMeasure::sd);
  CHECK_FALSE(at.suspect_below);
  CHECK(at.fail_below == 0.02);
  CHECK(at.min_count == 60);
  CHECK(std::get<pl::SolarQuenchingParams>(ch.qc.tests[8]).suspect_above_deg == 25);
  auto& fd = std::get<pl::FoulingDriftParams>(ch.qc.tests[9]);
  CHECK(fd.max_rise == 2);
  CHECK(fd.night_below_deg == -12);
  CHECK(fd.min_night_samples == 20);

  CHECK(ch.window.window_s == 600);
  CHECK(ch.window.include_suspect);
  CHECK(ch.window.median);
  CHECK(ch.window.min_pass_fraction == 0.75);
  CHECK(ch.window.max_empty_windows == 12);
  // The pipeline accepts what the validator accepted.
  CHECK_NOTHROW(pl::ChannelPipeline(ch));

  // A channel without blocks: no tests, the defaults of window_builder.h.
  pl::ChannelConfig bare = cfg::read_channel_pipeline(c, in, in.channels[1], p);
  CHECK(bare.qc.tests.empty());
  CHECK(bare.window.window_s == 600);
  CHECK_FALSE(bare.window.median);
  CHECK(bare.window.min_pass_fraction == 0.5);

  auto rules = cfg::read_alert_rules(c, p);
  REQUIRE(p.empty());
  REQUIRE(rules.size() == 1);
  const pl::AlertRule& r = rules[0];
  CHECK(r.name == "cyano");
  CHECK(r.channel == "pc");
  CHECK(r.statistic == pl::Statistic::max);
  CHECK(r.hysteresis == 0.8);
  CHECK(r.raise_windows == 2);
  CHECK(r.clear_windows == 3);
  CHECK(r.renotify_s == 21600);
  CHECK(r.min_count == 4);
  REQUIRE(r.levels.size() == 2);
  CHECK(r.levels[0].name == "watch");
  CHECK(r.levels[0].threshold == 3.4);
  REQUIRE(r.levels[0].conditions.size() == 1);
  CHECK(r.levels[0].conditions[0].channel == "chla");
  CHECK(r.levels[0].conditions[0].statistic == pl::Statistic::median);
  CHECK(r.levels[0].conditions[0].compare == pl::Compare::below);
  CHECK_FALSE(r.levels[0].conditions[0].value);
  CHECK(r.levels[1].conditions[0].statistic == pl::Statistic::mean);  // the default
  CHECK(r.levels[1].conditions[0].compare == pl::Compare::above);
  CHECK(r.levels[1].conditions[0].value == 1.5);
  CHECK_NOTHROW(pl::AlertEvaluator(rules));
}

TEST_CASE("no alerts block gives no rules; the station period is the default poll interval") {
  const cfg::StationConfig c = load(base());
  Problems p;
  CHECK(cfg::read_alert_rules(c, p).empty());
  auto ch = cfg::read_channel_pipeline(c, c.instruments[0], c.instruments[0].channels[0], p);
  CHECK(ch.qc.poll_interval_s == 60);
  CHECK(p.empty());
}

TEST_CASE("the shipped full-station example passes the whole check and builds a pipeline") {
  const std::string file = std::string(TARN_SOURCE_DIR) + "/config/examples/full-station.json";
  auto res = tarn::daemon::load_and_check(file);
  INFO(res.problems.render(file));
  REQUIRE(res.problems.empty());
  REQUIRE(res.config);
  Problems p;
  for (const auto& in : res.config->instruments)
    for (const auto& ch : in.channels) {
      auto c = cfg::read_channel_pipeline(*res.config, in, ch, p);
      CHECK(c.qc.tests.size() >= 8);
      CHECK_NOTHROW(pl::ChannelPipeline(c));
    }
  auto rules = cfg::read_alert_rules(*res.config, p);
  CHECK(p.empty());
  REQUIRE(rules.size() == 1);
  REQUIRE(rules[0].levels.size() == 3);
  // The issue's check values (common practice in lake monitoring, no source).
  CHECK(rules[0].levels[0].threshold == 3.4);
  CHECK(rules[0].levels[1].threshold == 6.7);
  CHECK(rules[0].levels[2].threshold == 13.4);
  CHECK(rules[0].raise_windows == 2);
  CHECK(rules[0].renotify_s == 21600);
  REQUIRE(rules[0].levels[0].conditions.size() == 1);
  CHECK(rules[0].levels[0].conditions[0].channel == "chla");
}

TEST_CASE("broken QC blocks name the pointer") {
  Json root = base();
  SECTION("unknown test kind, with a suggestion") {
    chla(root)["qc"] =
        Json::parse(R"([ { "kind": "gross_rang", "sensor_min": 0, "sensor_max": 1 } ])");
    Problems p = validate(root);
    REQUIRE(p.size() == 1);
    CHECK(p.list()[0].where == kChla + "/qc/0/kind");
    CHECK(p.list()[0].message.find("did you mean \"gross_range\"") != std::string::npos);
  }
  SECTION("unknown key in a test") {
    chla(root)["qc"] =
        Json::parse(R"([ { "kind": "spike", "suspect_threshold": 1, "fail_treshold": 3 } ])");
    Problems p = validate(root);
    CHECK(names(p, kChla + "/qc/0/fail_treshold"));
    CHECK(names(p, kChla + "/qc/0/fail_threshold"));  // the required key it missed
  }
  SECTION("fail threshold below the suspect threshold") {
    chla(root)["qc"] =
        Json::parse(R"([ { "kind": "spike", "suspect_threshold": 5, "fail_threshold": 2 } ])");
    Problems p = validate(root);
    REQUIRE(p.size() == 1);
    CHECK(p.list()[0].where == kChla + "/qc/0/fail_threshold");
    CHECK(p.list()[0].message.rfind("is 2; ", 0) == 0);
  }
  SECTION("paths stay right after an unknown kind is left out") {
    chla(root)["qc"] = Json::parse(R"([ { "kind": "nonsense" },
      { "kind": "spike", "suspect_threshold": 5, "fail_threshold": 2 } ])");
    Problems p = validate(root);
    CHECK(names(p, kChla + "/qc/0/kind"));
    CHECK(names(p, kChla + "/qc/1/fail_threshold"));
    CHECK(p.size() == 2);
  }
  SECTION("climatology month 13") {
    chla(root)["qc"] = Json::parse(
        R"([ { "kind": "climatology", "ranges": [ { "month": 13, "min": 0, "max": 1 } ] } ])");
    Problems p = validate(root);
    REQUIRE(p.size() == 1);
    CHECK(p.list()[0].where == kChla + "/qc/0/ranges/0/month");
  }
  SECTION("climatology month twice and max below min") {
    chla(root)["qc"] = Json::parse(R"([ { "kind": "climatology", "ranges": [
      { "month": 3, "min": 0, "max": 1 }, { "month": 3, "min": 5, "max": 1 } ] } ])");
    Problems p = validate(root);
    CHECK(names(p, kChla + "/qc/0/ranges/1/month"));
    CHECK(names(p, kChla + "/qc/0/ranges/1/max"));
  }
  SECTION("unknown reason name") {
    chla(root)["qc"] =
        Json::parse(R"([ { "kind": "instrument_status", "fail_on": ["garbled", "ofline"] } ])");
    Problems p = validate(root);
    REQUIRE(p.size() == 1);
    CHECK(p.list()[0].where == kChla + "/qc/0/fail_on/1");
    CHECK(p.list()[0].message.find("did you mean \"offline\"") != std::string::npos);
  }
  SECTION("a QC reason is not a driver status") {
    chla(root)["qc"] =
        Json::parse(R"([ { "kind": "instrument_status", "suspect_on": ["spike"] } ])");
    CHECK(names(validate(root), kChla + "/qc/0/suspect_on/0"));
  }
  SECTION("a bit both in fail_on and suspect_on") {
    chla(root)["qc"] = Json::parse(
        R"([ { "kind": "instrument_status", "fail_on": ["garbled"], "suspect_on": ["garbled"] } ])");
    CHECK(names(validate(root), kChla + "/qc/0/suspect_on"));
  }
  SECTION("wrong type is reported once, not again by the range check") {
    chla(root)["qc"] =
        Json::parse(R"([ { "kind": "spike", "suspect_threshold": "5", "fail_threshold": 9 } ])");
    Problems p = validate(root);
    REQUIRE(p.size() == 1);
    CHECK(p.list()[0].where == kChla + "/qc/0/suspect_threshold");
  }
  SECTION("out-of-range number") {
    chla(root)["qc"] = Json::parse(R"([ { "kind": "solar_quenching", "suspect_above_deg": 95 } ])");
    CHECK(names(validate(root), kChla + "/qc/0/suspect_above_deg"));
  }
  SECTION("unknown attenuated measure") {
    chla(root)["qc"] =
        Json::parse(R"([ { "kind": "attenuated_signal", "measure": "iqr", "suspect_below": 1 } ])");
    CHECK(names(validate(root), kChla + "/qc/0/measure"));
  }
  SECTION("timing late_s more than half the poll interval") {
    chla(root)["qc"] = Json::parse(R"([ { "kind": "timing", "late_s": 31 } ])");
    Problems p = validate(root);
    REQUIRE(p.size() == 1);
    CHECK(p.list()[0].where == kChla + "/qc/0/late_s");
  }
  SECTION("a test that is not an object") {
    chla(root)["qc"] = Json::parse(R"([ "spike" ])");
    CHECK(names(validate(root), kChla + "/qc/0"));
  }
  SECTION("flat line without its tolerance") {
    chla(root)["qc"] = Json::parse(R"([ { "kind": "flat_line" } ])");
    CHECK(names(validate(root), kChla + "/qc/0/tolerance"));
  }
}

TEST_CASE("broken window blocks name the pointer") {
  Json root = base();
  SECTION("unknown key") {
    chla(root)["window"] = Json::parse(R"({ "medain": true })");
    Problems p = validate(root);
    REQUIRE(p.size() == 1);
    CHECK(p.list()[0].where == kChla + "/window/medain");
    CHECK(p.list()[0].message.find("did you mean \"median\"") != std::string::npos);
  }
  SECTION("fraction above 1") {
    chla(root)["window"] = Json::parse(R"({ "min_pass_fraction": 1.5 })");
    CHECK(names(validate(root), kChla + "/window/min_pass_fraction"));
  }
  SECTION("a window per channel is the station's, not the channel's") {
    chla(root)["window"] = Json::parse(R"({ "window_s": 300 })");
    CHECK(names(validate(root), kChla + "/window/window_s"));
  }
}

TEST_CASE("broken alert blocks name the pointer") {
  Json root = base();
  root["alerts"] = Json::parse(R"({ "rules": [ {
    "name": "cyano", "channel": "pc",
    "levels": [ { "name": "watch", "threshold": 3.4 }, { "name": "warning", "threshold": 6.7 } ] } ] })");
  Json& rule = root["alerts"]["rules"][0];
  SECTION("the valid starting point passes") {
    CHECK(validate(root).empty());
  }
  SECTION("alert on an unknown channel") {
    rule["channel"] = "pcy";
    Problems p = validate(root);
    REQUIRE(p.size() == 1);
    CHECK(p.list()[0].where == "/alerts/rules/0/channel");
    CHECK(p.list()[0].message.find("did you mean \"pc\"") != std::string::npos);
  }
  SECTION("condition on an unknown channel") {
    rule["levels"][0]["conditions"] =
        Json::parse(R"([ { "channel": "chl", "compare": "below" } ])");
    CHECK(names(validate(root), "/alerts/rules/0/levels/0/conditions/0/channel"));
  }
  SECTION("levels not ascending") {
    rule["levels"][1]["threshold"] = 3.0;
    Problems p = validate(root);
    REQUIRE(p.size() == 1);
    CHECK(p.list()[0].where == "/alerts/rules/0/levels/1/threshold");
  }
  SECTION("median without the channel's window median") {
    rule["statistic"] = "median";
    CHECK(names(validate(root), "/alerts/rules/0/statistic"));
    pc(root)["window"] = Json::parse(R"({ "median": true })");
    CHECK(validate(root).empty());
  }
  SECTION("unknown statistic and compare") {
    rule["statistic"] = "p90";
    rule["levels"][0]["conditions"] =
        Json::parse(R"([ { "channel": "chla", "compare": "over" } ])");
    Problems p = validate(root);
    CHECK(names(p, "/alerts/rules/0/statistic"));
    CHECK(names(p, "/alerts/rules/0/levels/0/conditions/0/compare"));
  }
  SECTION("unknown keys at each depth") {
    root["alerts"]["rule"] = Json::array();
    rule["persistence"] = 2;
    rule["levels"][0]["colour"] = "amber";
    Problems p = validate(root);
    CHECK(names(p, "/alerts/rule"));
    CHECK(names(p, "/alerts/rules/0/persistence"));
    CHECK(names(p, "/alerts/rules/0/levels/0/colour"));
  }
  SECTION("out-of-range counts") {
    rule["raise_windows"] = 0;
    rule["renotify_s"] = -1;
    Problems p = validate(root);
    CHECK(names(p, "/alerts/rules/0/raise_windows"));
    CHECK(names(p, "/alerts/rules/0/renotify_s"));
  }
  SECTION("min_count above the samples a window holds") {
    rule["min_count"] = 11;  // 600 s windows of 60 s polls hold 10
    Problems p = validate(root);
    REQUIRE(p.size() == 1);
    CHECK(p.list()[0].where == "/alerts/rules/0/min_count");
    rule["min_count"] = 10;
    CHECK(validate(root).empty());
  }
  SECTION("duplicate rule names") {
    root["alerts"]["rules"].push_back(rule);
    CHECK(names(validate(root), "/alerts/rules/1/name"));
  }
  SECTION("missing levels") {
    rule.erase("levels");
    CHECK(names(validate(root), "/alerts/rules/0/levels"));
  }
}

TEST_CASE("alert keys accept_doubts and stale_windows, fouling growth keys, window alert masks") {
  Json root = base();
  pc(root)["qc"] = Json::parse(R"([
    { "kind": "fouling_drift", "max_rise": 2, "growth_fraction": 0.3, "max_rise_per_night": 1.5 }
  ])");
  root["alerts"] = Json::parse(R"({ "rules": [
    { "name": "cyano", "channel": "pc", "levels": [ { "name": "watch", "threshold": 3.4 } ] },
    { "name": "strict", "channel": "chla", "accept_doubts": [], "stale_windows": 0,
      "levels": [ { "name": "watch", "threshold": 10,
                    "conditions": [ { "channel": "pc", "compare": "above", "value": 1 } ] } ] },
    { "name": "spiky", "channel": "pc", "accept_doubts": ["spike", "solar_quenching"],
      "stale_windows": 12, "levels": [ { "name": "watch", "threshold": 3.4 } ] } ] })");
  const cfg::StationConfig c = load(root);
  Problems p;
  cfg::validate_pipeline(c, p);
  INFO(p.render("t.json"));
  REQUIRE(p.empty());
  auto rules = cfg::read_alert_rules(c, p);
  REQUIRE(rules.size() == 3);
  // Defaults: solar_quenching and fouling_drift accepted, stale after 6 windows.
  CHECK(rules[0].accept_doubts == (pl::reason::solar_quenching | pl::reason::fouling_drift));
  CHECK(rules[0].stale_windows == 6);
  CHECK(rules[1].accept_doubts == 0u);
  CHECK(rules[1].stale_windows == 0);
  CHECK(rules[2].accept_doubts == (pl::reason::spike | pl::reason::solar_quenching));
  CHECK(rules[2].stale_windows == 12);
  const auto& in = c.instruments[0];
  auto pcc = cfg::read_channel_pipeline(c, in, in.channels[1], p);
  CHECK(pcc.window.alert_masks ==
        std::vector<std::uint32_t>{pl::reason::solar_quenching | pl::reason::fouling_drift, 0u,
                                   pl::reason::spike | pl::reason::solar_quenching});
  auto chc = cfg::read_channel_pipeline(c, in, in.channels[0], p);
  CHECK(chc.window.alert_masks == std::vector<std::uint32_t>{0u});
  auto& fd = std::get<pl::FoulingDriftParams>(pcc.qc.tests[0]);
  CHECK(fd.growth_fraction == 0.3);
  CHECK(fd.max_rise_per_night == 1.5);
  CHECK_NOTHROW(pl::ChannelPipeline(pcc));

  SECTION("an unknown doubt gets a did-you-mean and the allowed names") {
    root["alerts"]["rules"][0]["accept_doubts"] = Json::parse(R"(["solar_quenchng", 3])");
    root["alerts"]["rules"][0]["stale_windows"] = -1;
    const Problems q = validate(root);
    INFO(q.render("t.json"));
    REQUIRE(names(q, "/alerts/rules/0/accept_doubts/0"));
    REQUIRE(names(q, "/alerts/rules/0/accept_doubts/1"));
    CHECK(names(q, "/alerts/rules/0/stale_windows"));
    for (const auto& x : q.list())
      if (x.where == "/alerts/rules/0/accept_doubts/0") {
        CHECK(x.message.find("did you mean \"solar_quenching\"") != std::string::npos);
        CHECK(x.message.find("allowed: gross_range_operator") != std::string::npos);
      }
  }
  SECTION("a zero growth_fraction names its pointer (the pipeline's check)") {
    pc(root)["qc"][0]["growth_fraction"] = 0;
    const Problems q = validate(root);
    INFO(q.render("t.json"));
    CHECK(names(q, "/instruments/0/channels/1/qc/0/growth_fraction"));
  }
  SECTION("a negative max_rise_per_night names its pointer (the reader's range)") {
    pc(root)["qc"][0]["max_rise_per_night"] = -1;
    const Problems q = validate(root);
    INFO(q.render("t.json"));
    CHECK(names(q, "/instruments/0/channels/1/qc/0/max_rise_per_night"));
  }
}
