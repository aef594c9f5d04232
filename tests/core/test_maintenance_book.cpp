// MaintenanceBook: periods per instrument and for the whole station, their
// maximum duration, and how they combine. Simulated time: times passed in.
#include <catch2/catch.hpp>

#include "daemon/core/maintenance_book.h"

using tarn::config::MaintenanceArgs;
using tarn::daemon::MaintenanceBook;

namespace {
constexpr std::int64_t t0 = 1780272000;  // 2026-06-01T00:00:00Z
const std::vector<std::string> instruments = {"sonde", "fluorometer", "met"};

MaintenanceArgs start(std::string instrument = "", std::string note = "") {
  MaintenanceArgs a;
  a.start = true;
  a.instrument = std::move(instrument);
  a.note = std::move(note);
  return a;
}
MaintenanceArgs stop(std::string instrument = "") {
  MaintenanceArgs a;
  a.instrument = std::move(instrument);
  return a;
}
}  // namespace

TEST_CASE("an unknown instrument is refused with the configured names", "[maintenance]") {
  MaintenanceBook b;
  auto why = b.check(start("fluoro"), instruments);
  CHECK(why ==
        "unknown instrument \"fluoro\"; allowed: one of the configured instruments (sonde, "
        "fluorometer, met)");
  CHECK(b.check(stop("fluoro"), instruments).find("unknown instrument") == 0);
}

TEST_CASE("several instruments at once, each ends on its own", "[maintenance]") {
  MaintenanceBook b;
  REQUIRE(b.check(start("sonde"), instruments).empty());
  b.start(start("sonde", "wiper"), t0, 600);
  REQUIRE(b.check(start("fluorometer"), instruments).empty());
  b.start(start("fluorometer"), t0 + 60, 7200);
  CHECK(b.covers("sonde"));
  CHECK(b.covers("fluorometer"));
  CHECK_FALSE(b.covers("met"));
  CHECK(b.check(start("sonde"), instruments) ==
        "maintenance of instrument sonde is already active");
  CHECK(b.next_until() == t0 + 600);
  // Stopping one leaves the other.
  REQUIRE(b.check(stop("sonde"), instruments).empty());
  auto ended = b.stop("sonde", t0 + 300);
  REQUIRE(ended.size() == 1);
  CHECK(ended[0].end_t == t0 + 300);
  CHECK(ended[0].ended_by == "stop");
  CHECK(ended[0].note == "wiper");
  CHECK_FALSE(b.covers("sonde"));
  CHECK(b.covers("fluorometer"));
  CHECK(b.check(stop("sonde"), instruments) ==
        "instrument sonde has no maintenance period of its own");
}

TEST_CASE("a period ends by itself at its maximum duration", "[maintenance]") {
  MaintenanceBook b;
  b.start(start("fluorometer"), t0, 7200);
  b.start(start("sonde"), t0, 600);
  CHECK(b.expire(t0 + 599, false).empty());
  auto ended = b.expire(t0 + 601, false);  // the timer fired a second late
  REQUIRE(ended.size() == 1);
  CHECK(ended[0].instrument == "sonde");
  CHECK(ended[0].end_t == t0 + 601);
  CHECK(ended[0].ended_by == "time_limit");
  REQUIRE(b.last_ended());
  CHECK(b.last_ended()->instrument == "sonde");
  // Ran out while the daemon was down: ended at its own end, not at the restart.
  ended = b.expire(t0 + 90000, /*at_until=*/true);
  REQUIRE(ended.size() == 1);
  CHECK(ended[0].end_t == t0 + 7200);
  CHECK_FALSE(b.any());
  CHECK_FALSE(b.next_until());
}

TEST_CASE("station-wide and per-instrument periods combine", "[maintenance]") {
  MaintenanceBook b;
  b.start(start("met"), t0, 7200);
  // The station may start while an instrument is in its own period.
  REQUIRE(b.check(start(), instruments).empty());
  b.start(start(), t0 + 10, 3600);
  CHECK(b.covers("sonde"));
  // An instrument cannot start one the station's period covers already.
  CHECK(b.check(start("sonde"), instruments).find("the whole station is in maintenance") == 0);
  // Stopping an instrument without its own period says what covers it.
  CHECK(b.check(stop("sonde"), instruments).find("the whole station's period covers it") !=
        std::string::npos);
  // stop without an instrument ends every period.
  REQUIRE(b.check(stop(), instruments).empty());
  auto ended = b.stop("", t0 + 100);
  CHECK(ended.size() == 2);
  CHECK_FALSE(b.any());
  CHECK(b.check(stop(), instruments) == "no maintenance period is active");
}

TEST_CASE("a reload that drops an instrument ends its period", "[maintenance]") {
  MaintenanceBook b;
  b.start(start("met"), t0, 7200);
  b.start(start("sonde"), t0, 7200);
  auto ended = b.drop_unknown({"sonde", "fluorometer"}, t0 + 50);
  REQUIRE(ended.size() == 1);
  CHECK(ended[0].instrument == "met");
  CHECK(ended[0].ended_by == "config");
  CHECK(b.covers("sonde"));
}
