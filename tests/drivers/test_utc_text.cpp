// UTC text helpers: checked against Python's calendar.timegm (stdlib), values
// computed with /usr/bin/python3 -c "import calendar, datetime; ...".
#include <catch2/catch.hpp>

#include "drivers/os/utc_text.h"

using namespace tarn::os;

TEST_CASE("UTC timestamps format and parse against calendar.timegm", "[os]") {
  struct Case {
    const char* text;
    std::int64_t unix_s;
  };
  // Reference: calendar.timegm(datetime.fromisoformat(text).timetuple()) in Python 3.11.
  const Case cases[] = {{"2026-06-01T00:00:00Z", 1780272000},
                        {"2000-02-29T23:59:59Z", 951868799},
                        {"1969-12-31T23:59:59Z", -1},
                        {"2100-03-01T12:34:56Z", 4107587696}};
  for (auto& c : cases) {
    CHECK(parse_utc(c.text) == c.unix_s);
    CHECK(format_utc(c.unix_s) == c.text);
  }
  CHECK(parse_utc("2026-06-01") == 1780272000);
  CHECK(parse_utc("2026-06-01T00:00Z") == 1780272000);
  CHECK(parse_utc("1780272000") == 1780272000);
  CHECK(format_utc_compact(1780272000) == "20260601T000000Z");
}

TEST_CASE("malformed or impossible timestamps are refused", "[os]") {
  for (const char* bad :
       {"", "2026-13-01T00:00:00Z", "2026-02-29T00:00:00Z", "2100-02-29", "2026-06-01T24:00:00Z",
        "2026-06-01T00:00:00", "2026-06-01 00:00:00Z", "12ab", "2026-06-01T00:00:00+01:00"})
    CHECK_FALSE(parse_utc(bad));
  CHECK(parse_utc("2024-02-29") == 1709164800);  // leap year; calendar.timegm reference
}
