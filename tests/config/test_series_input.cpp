// config/series_input: the recorded series `tarn replay` reads (CSV and JSON
// Lines), its times, and one error with a line number for each kind of bad line.
#include <catch2/catch.hpp>

#include <string>

#include "config/series_input.h"

namespace cfg = tarn::config;

namespace {

cfg::SeriesParse csv(const std::string& text) {
  return cfg::parse_series(text, cfg::SeriesFormat::csv);
}
cfg::SeriesParse jsonl(const std::string& text) {
  return cfg::parse_series(text, cfg::SeriesFormat::jsonl);
}

}  // namespace

TEST_CASE("ISO 8601 UTC times against Python's datetime", "[series]") {
  // Expected values printed by Debian's python3 (3.11):
  //   int(datetime.fromisoformat(S).timestamp()) for S with +00:00.
  CHECK(cfg::parse_iso_utc("1970-01-01T00:00:00Z") == 0);
  CHECK(cfg::parse_iso_utc("2000-01-01T00:00:00Z") == 946684800);
  CHECK(cfg::parse_iso_utc("2026-06-20T12:00:00Z") == 1781956800);
  CHECK(cfg::parse_iso_utc("2024-02-29T23:59:59Z") == 1709251199);  // leap day
  CHECK(cfg::parse_iso_utc("2100-03-01T00:00:00Z") == 4107542400);  // 2100 is no leap year
  CHECK(cfg::parse_iso_utc("1969-12-31T23:59:59Z") == -1);
  // Variants: "+00:00", a space for the T, a fraction (dropped).
  CHECK(cfg::parse_iso_utc("2026-06-20T12:00:00+00:00") == 1781956800);
  CHECK(cfg::parse_iso_utc("2026-06-20 12:00:00Z") == 1781956800);
  CHECK(cfg::parse_iso_utc("2026-06-20T12:00:00.999Z") == 1781956800);
}

TEST_CASE("impossible or zone-less times are refused", "[series]") {
  // Day counts per month and the Gregorian leap rule (ISO 8601:2004 §3.2.1 uses
  // the Gregorian calendar; 1900 and 2100 are not leap years, 2000 is).
  for (const char* bad : {"2026-02-29T00:00:00Z", "2100-02-29T00:00:00Z", "2026-04-31T00:00:00Z",
                          "2026-13-01T00:00:00Z", "2026-00-10T00:00:00Z", "2026-06-20T24:00:00Z",
                          "2026-06-20T12:60:00Z", "2026-06-20T12:00:60Z", "2026-06-20T12:00:00",
                          "2026-06-20T12:00:00+02:00", "2026-06-20T12:00Z", "2026-06-20",
                          "2026-06-20T12:00:00.Z", "20260620T120000Z", ""})
    CHECK_FALSE(cfg::parse_iso_utc(bad).has_value());
  CHECK(cfg::parse_iso_utc("2000-02-29T00:00:00Z") == 951782400);  // python3 datetime, as above
}

TEST_CASE("CSV with ISO and epoch times, empty values and quotes", "[series]") {
  auto r =
      csv("time,channel,value\r\n"
          "2026-06-20T12:00:00Z,pc,1.5\r\n"
          "1781956800,chla,\r\n"
          "\n"
          "\"2026-06-20T12:01:00Z\",\"pc\",\"2.25\"\n"
          "1781956860.5,chla,-0.5e1");
  REQUIRE_FALSE(r.error);
  REQUIRE(r.input.channels == std::vector<std::string>{"pc", "chla"});
  REQUIRE(r.input.records.size() == 4);
  auto& a = r.input.records;
  CHECK(a[0].t == 1781956800);
  CHECK(a[0].channel == 0);
  CHECK(a[0].value == 1.5);
  CHECK(a[0].line == 2);
  CHECK(a[1].t == 1781956800);
  CHECK(a[1].channel == 1);
  CHECK_FALSE(a[1].value.has_value());
  CHECK(a[2].t == 1781956860);
  CHECK(a[2].value == 2.25);
  CHECK(a[2].line == 5);
  CHECK(a[3].t == 1781956860);  // fraction dropped
  CHECK(a[3].value == -5.0);
  CHECK(a[3].line == 6);
}

// "f" and "r" are what `tarn store export --format jsonl` adds (ignored).
TEST_CASE("JSONL with string and number times and null values", "[series]") {
  auto r = jsonl(
      "{\"t\":\"2026-06-20T12:00:00Z\",\"ch\":\"pc\",\"v\":1.5,\"f\":3,\"r\":8}\n"
      "{\"t\":1781956800,\"ch\":\"temp\",\"v\":null}\n"
      "\n"
      "{\"ch\":\"pc\",\"t\":1781956860.9}\n");
  REQUIRE_FALSE(r.error);
  REQUIRE(r.input.records.size() == 3);
  CHECK(r.input.records[0].value == 1.5);
  CHECK(r.input.records[1].t == 1781956800);
  CHECK_FALSE(r.input.records[1].value.has_value());
  CHECK(r.input.records[2].t == 1781956860);
  CHECK_FALSE(r.input.records[2].value.has_value());
  CHECK(r.input.records[2].line == 4);
}

TEST_CASE("each bad line gives its line number and what is allowed", "[series]") {
  struct Case {
    cfg::SeriesFormat f;
    std::string text;
    std::size_t line;
    std::string says;
  };
  const std::string h = "time,channel,value\n";
  const std::string ok = "2026-06-20T12:00:00Z,pc,1\n";
  for (const Case& c : {
           Case{cfg::SeriesFormat::csv, "t,ch,v\n" + ok, 1, "header"},
           Case{cfg::SeriesFormat::csv, "", 1, "no CSV header"},
           Case{cfg::SeriesFormat::csv, h + ok + "2026-06-20T12:01:00Z,pc\n", 3, "2 fields"},
           Case{cfg::SeriesFormat::csv, h + ok + "yesterday,pc,1\n", 3, "is not a time"},
           Case{cfg::SeriesFormat::csv, h + ok + "2026-06-20T12:01:00Z,pc,abc\n", 3,
                "is not a number"},
           Case{cfg::SeriesFormat::csv, h + ok + "2026-06-20T12:01:00Z,pc,nan\n", 3,
                "is not a number"},
           Case{cfg::SeriesFormat::csv, h + ok + "2026-06-20T12:01:00Z,,1\n", 3, "empty channel"},
           Case{cfg::SeriesFormat::csv, h + ok + "2026-06-20T11:59:00Z,pc,1\n", 3,
                "not after its sample on line 2"},
           Case{cfg::SeriesFormat::csv, h + ok + "2026-06-20T12:00:00Z,pc,2\n", 3,
                "increasing time order"},
           Case{cfg::SeriesFormat::jsonl, "{\"t\":1,\"ch\":\"pc\",\"v\":1}\n{\"t\":1,", 2,
                "not valid JSON"},
           Case{cfg::SeriesFormat::jsonl, "[1,2]\n", 1, "not a JSON object"},
           Case{cfg::SeriesFormat::jsonl, "{\"t\":1,\"ch\":\"pc\",\"value\":1}\n", 1,
                "unknown key \"value\""},
           Case{cfg::SeriesFormat::jsonl, "{\"ch\":\"pc\",\"v\":1}\n", 1, "no \"t\""},
           Case{cfg::SeriesFormat::jsonl, "{\"t\":true,\"ch\":\"pc\"}\n", 1, "is not a time"},
           Case{cfg::SeriesFormat::jsonl, "{\"t\":1e300,\"ch\":\"pc\"}\n", 1, "is not a time"},
           Case{cfg::SeriesFormat::jsonl, "{\"t\":1,\"ch\":3}\n", 1, "\"ch\" missing"},
           Case{cfg::SeriesFormat::jsonl, "{\"t\":1,\"ch\":\"pc\",\"v\":\"1\"}\n", 1,
                "is not a number"},
       }) {
    auto r = cfg::parse_series(c.text, c.f);
    INFO(c.text);
    REQUIRE(r.error);
    CHECK(r.error->line == c.line);
    CHECK_THAT(r.error->message, Catch::Contains(c.says));
    CHECK_THAT(r.error->message, Catch::Contains("; allowed"));
    CHECK(r.error->message.find('\n') == std::string::npos);
  }
}

TEST_CASE("a channel's order is its own; channels may follow one another", "[series]") {
  auto r =
      csv("time,channel,value\n"
          "1781956800,pc,1\n1781956860,pc,2\n"
          "1781956800,chla,1\n1781956860,chla,2\n");
  REQUIRE_FALSE(r.error);
  CHECK(r.input.records.size() == 4);
}

TEST_CASE("format by extension, else by content", "[series]") {
  CHECK(cfg::choose_series_format("season.csv", "{").format == cfg::SeriesFormat::csv);
  CHECK(cfg::choose_series_format("season.JSONL", "time").format == cfg::SeriesFormat::jsonl);
  CHECK(cfg::choose_series_format("season.ndjson", "").format == cfg::SeriesFormat::jsonl);
  auto c = cfg::choose_series_format("", "\n  {\"t\":1}");
  CHECK(c.format == cfg::SeriesFormat::jsonl);
  CHECK_THAT(c.how, Catch::Contains("content"));
  CHECK(cfg::choose_series_format("data.txt", "time,channel,value\n").format ==
        cfg::SeriesFormat::csv);
}
