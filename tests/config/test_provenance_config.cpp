// Provenance keys of the station config (channel depth_m / height_m, instrument model,
// serial, calibrated_on) checked with JSON pointers, and carried into the manifest.
#include <catch2/catch.hpp>

#include <string>

#include "codec/manifest.h"
#include "config/station_config.h"
#include "daemon/core/manifest_json.h"

using tarn::config::Json;
namespace cfg = tarn::config;

namespace {

// A small valid station on the invented Lake Hollin (an invented point): one
// fluorometer with chla and pc.
Json base() {
  return Json::parse(R"({
    "station": { "id": "hollin-jetty", "latitude": 55.10, "longitude": 3.60 },
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

cfg::LoadResult load(const Json& root) {
  return cfg::load_text(root.dump(), "t.json");
}

// The single problem of `root`, which must be at `pointer` and mention `part`.
void one_problem(const Json& root, const std::string& pointer, const std::string& part) {
  auto res = load(root);
  INFO(res.problems.render("t.json"));
  REQUIRE(res.problems.size() == 1);
  CHECK(res.problems.list()[0].where == pointer);
  CHECK(res.problems.list()[0].message.find(part) != std::string::npos);
}

const std::string kInst = "/instruments/0";

}  // namespace

TEST_CASE("provenance keys are optional and reach the manifest", "[config][manifest]") {
  Json root = base();
  {
    auto res = load(root);
    REQUIRE(res.problems.empty());
    auto m = tarn::daemon::manifest_of_config(*res.config);
    REQUIRE(m);
    CHECK(m->latitude == 55.10);
    CHECK(m->longitude == 3.60);
    CHECK_FALSE(m->elevation_m);  // not given: absent, not 0
    CHECK_FALSE(m->channels[0].depth_m);
    CHECK(m->channels[0].model.empty());
    CHECK(m->channels[0].calibrated_on.empty());
  }
  root["station"]["elevation_m"] = 142;
  root["instruments"][0]["model"] = "TF-3 fluorometer";
  root["instruments"][0]["serial"] = "TF3-0042";
  root["instruments"][0]["calibrated_on"] = "2024-02-29";
  root["instruments"][0]["channels"][0]["depth_m"] = 0.8;
  root["instruments"][0]["channels"][1]["height_m"] = 0.25;  // above the surface
  auto res = load(root);
  INFO(res.problems.render("t.json"));
  REQUIRE(res.problems.empty());
  auto m = tarn::daemon::manifest_of_config(*res.config);
  REQUIRE(m);
  CHECK(m->elevation_m == 142);
  CHECK(m->channels[0].depth_m == 0.8);
  CHECK(m->channels[1].depth_m == -0.25);  // one vertical position, positive down
  for (const auto& c : m->channels) {
    CHECK(c.model == "TF-3 fluorometer");
    CHECK(c.serial == "TF3-0042");
    CHECK(c.calibrated_on == "2024-02-29");
  }
  // M.json written by tarn manifest and read back gives the same manifest and hash.
  auto again = tarn::daemon::manifest_from_json(tarn::daemon::manifest_to_json(*m));
  REQUIRE(again);
  CHECK(*again == *m);
  CHECK(tarn::codec::manifest_hash(*again) == tarn::codec::manifest_hash(*m));
}

TEST_CASE("bad provenance keys are named by their pointer", "[config]") {
  Json root = base();
  SECTION("depth and height together") {
    root["instruments"][0]["channels"][1]["depth_m"] = 1;
    root["instruments"][0]["channels"][1]["height_m"] = 1;
    one_problem(root, kInst + "/channels/1/height_m", "not both");
  }
  SECTION("negative depth") {
    root["instruments"][0]["channels"][0]["depth_m"] = -1;
    auto res = load(root);
    REQUIRE(res.problems.size() == 1);
    CHECK(res.problems.list()[0].where == kInst + "/channels/0/depth_m");
  }
  SECTION("depth as text") {
    root["instruments"][0]["channels"][0]["depth_m"] = "1 m";
    auto res = load(root);
    REQUIRE(res.problems.size() == 1);
    CHECK(res.problems.list()[0].where == kInst + "/channels/0/depth_m");
  }
  SECTION("a serial over 255 bytes") {
    root["instruments"][0]["serial"] = std::string(256, '7');
    one_problem(root, kInst + "/serial", "1 to 255 bytes");
  }
  SECTION("an empty model") {
    root["instruments"][0]["model"] = "";
    one_problem(root, kInst + "/model", "1 to 255 bytes");
  }
  SECTION("dates that are not on the calendar") {
    // Gregorian rule: 1900 is not a leap year (a century not divisible by 400).
    for (const char* d : {"1900-02-29", "2023-02-29", "2024-04-31", "2024-13-01", "2024-4-01",
                          "15/04/2024", "1899-12-31", "2300-01-01"}) {
      INFO(d);
      root["instruments"][0]["calibrated_on"] = d;
      one_problem(root, kInst + "/calibrated_on", "YYYY-MM-DD");
    }
  }
  SECTION("a leap day that is on the calendar") {
    root["instruments"][0]["calibrated_on"] = "2000-02-29";
    CHECK(load(root).problems.empty());
  }
  SECTION("an unknown key still is one") {
    root["instruments"][0]["calibrated"] = "2024-01-01";
    auto res = load(root);
    REQUIRE(res.problems.size() == 1);
    CHECK(res.problems.list()[0].where == kInst + "/calibrated");
  }
}

TEST_CASE("M.json provenance keys are checked with pointers", "[manifest]") {
  auto j = Json::parse(R"({"station": "s", "period_s": 60, "window_s": 600,
    "latitude": 55.10, "longitude": 3.60, "elevation_m": 142,
    "channels": [{"name": "chl", "quantity": "chlorophyll-a", "unit": "ug/L", "resolution": 0.01,
                  "depth_m": -2, "model": "TF-3 fluorometer", "calibrated_on": "2024-04-15"}]})");
  auto m = tarn::daemon::manifest_from_json(j);
  REQUIRE(m);
  CHECK(m->channels[0].depth_m == -2);
  CHECK(m->channels[0].serial.empty());
  auto bad = [&](Json x, const std::string& pointer) {
    auto r = tarn::daemon::manifest_from_json(x);
    REQUIRE_FALSE(r);
    INFO(r.error().message);
    CHECK(r.error().message.rfind(pointer + ":", 0) == 0);
  };
  Json x = j;
  x.erase("longitude");
  bad(x, "/longitude");
  x = j;
  x["latitude"] = 95;
  bad(x, "/latitude");
  x = j;
  x["channels"][0]["calibrated_on"] = "2024-02-30";
  bad(x, "/channels/0/calibrated_on");
  x = j;
  x["channels"][0]["depth_m"] = "deep";
  bad(x, "/channels/0/depth_m");
  x = j;
  x["channels"][0]["height_m"] = 1;  // M.json has only the signed depth_m
  bad(x, "/channels/0/height_m");
}
