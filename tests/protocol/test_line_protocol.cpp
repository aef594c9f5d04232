#include <catch2/catch.hpp>

#include <cstdio>
#include <string>
#include <vector>

#include "drivers/protocol/line_protocol.h"

using namespace tarn::protocol;
using namespace tarn::protocol::line;

namespace {

std::vector<std::string> split_all(LineSplitter& s, std::string_view bytes) {
  std::vector<std::string> out;
  s.feed(bytes, [&](std::string_view l) { out.emplace_back(l); });
  return out;
}

FieldMapper mapper(LineFormat f) {
  auto m = FieldMapper::create(std::move(f));
  REQUIRE(m);
  return std::move(m).value();
}

}  // namespace

TEST_CASE("LineSplitter terminators", "[line]") {
  LineSplitter s(64);
  CHECK(split_all(s, "a,1\r\nb,2\nc,3\rd,4\n\r\n\n") ==
        std::vector<std::string>{"a,1", "b,2", "c,3", "d,4"});
  CHECK(s.lines() == 4);
  SECTION("lines across reads") {
    CHECK(split_all(s, "CHL=1").empty());
    CHECK(s.pending_bytes() == 5);
    CHECK(split_all(s, "2.5\r").size() == 1);
    CHECK(split_all(s, "\nPC=").empty());
    CHECK(split_all(s, "3\n") == std::vector<std::string>{"PC=3"});
  }
  SECTION("reset drops a partial line") {
    split_all(s, "late fragm");
    s.reset();
    CHECK(s.pending_bytes() == 0);
    CHECK(split_all(s, "fresh\n") == std::vector<std::string>{"fresh"});
  }
}

TEST_CASE("LineSplitter caps line length", "[line]") {
  LineSplitter s(8);
  SECTION("a line of exactly the cap passes, one byte more is dropped") {
    CHECK(split_all(s, "12345678\n") == std::vector<std::string>{"12345678"});
    CHECK(split_all(s, "123456789\nok\n") == std::vector<std::string>{"ok"});
    CHECK(s.overlong_lines() == 1);
  }
  SECTION("a babbling instrument: megabytes without a terminator") {
    const std::string chunk(4096, 'x');
    for (int i = 0; i < 512; ++i) {  // 2 MiB
      CHECK(split_all(s, chunk).empty());
      REQUIRE(s.pending_bytes() <= s.max_line_bytes());
    }
    CHECK(s.overlong_lines() == 1);
    // The babble ends: the next real line is delivered whole.
    CHECK(split_all(s, "\n$OK*00\n") == std::vector<std::string>{"$OK*00"});
  }
  SECTION("many over-long lines are each counted") {
    std::string bytes;
    for (int i = 0; i < 100; ++i) bytes += std::string(20, 'y') + "\r\n";
    CHECK(split_all(s, bytes).empty());
    CHECK(s.overlong_lines() == 100);
  }
  CHECK_THROWS_AS(LineSplitter(0), std::invalid_argument);
}

TEST_CASE("NMEA-style checksum", "[line]") {
  // $GPGGA example of Dale DePriest's "NMEA data" page (from memory), checksum 47.
  const std::string gga = "$GPGGA,123519,4807.038,N,01131.000,E,1,08,0.9,545.4,M,46.9,M,,*47";
  auto c = check_nmea_checksum(gga);
  CHECK(c.state == ChecksumState::ok);
  CHECK(c.body.substr(0, 6) == "GPGGA,");
  CHECK(check_nmea_checksum("GPRMC,123519,A,4807.038,N,01131.000,E,022.4,084.4,230394,003.1,W*6a  ")
            .state == ChecksumState::ok);  // no '$', lower-case hex, trailing blanks
  CHECK(check_nmea_checksum(gga.substr(0, gga.size() - 1) + "8").state == ChecksumState::mismatch);
  CHECK(check_nmea_checksum("$GPGGA,1*4").state == ChecksumState::malformed);
  CHECK(check_nmea_checksum("$GPGGA,1*4G").state == ChecksumState::malformed);
  CHECK(check_nmea_checksum("$GPGGA,1").state == ChecksumState::absent);
  // A NUL in place of the '$' leaves the XOR unchanged: refused as malformed.
  CHECK(check_nmea_checksum(std::string("\0", 1) + gga.substr(1)).state ==
        ChecksumState::malformed);
  CHECK(check_nmea_checksum("$GP\x01GGA*00").state == ChecksumState::malformed);
}

TEST_CASE("parse_number", "[line]") {
  CHECK(parse_number("12.5").value() == 12.5);
  CHECK(parse_number(" -0.25 ").value() == -0.25);
  CHECK(parse_number("+3").value() == 3.0);
  CHECK(parse_number("1.5e2").value() == 150.0);
  CHECK(parse_number("").error() == FieldFault::empty);
  CHECK(parse_number("  ").error() == FieldFault::empty);
  CHECK(parse_number("12.5ug").error() == FieldFault::not_numeric);
  CHECK(parse_number("+-1").error() == FieldFault::not_numeric);
  CHECK(parse_number("nan").error() == FieldFault::not_numeric);
  CHECK(parse_number("inf").error() == FieldFault::not_numeric);
  CHECK(parse_number("1e999").error() == FieldFault::not_numeric);
  CHECK(parse_number("0x10").error() == FieldFault::not_numeric);
  CHECK(parse_number("1,5").error() == FieldFault::not_numeric);
}

TEST_CASE("FieldMapper with a delimiter and checksum", "[line]") {
  // An invented fluorometer sentence of the demo station: id, chl counts, pc counts, temp.
  LineFormat f;
  f.split = Split::delimiter;
  f.delimiter = ',';
  f.checksum = Checksum::required;
  f.prefix = "$HOLF";
  f.channel_fields = {1, 2, 3};
  const FieldMapper m = mapper(f);
  // Checksum of "HOLF,1234,87,18.25" computed by hand as the XOR of its bytes.
  const auto line = [](std::string body) {
    unsigned x = 0;
    for (char ch : body) x ^= static_cast<unsigned char>(ch);
    char hex[3];
    std::snprintf(hex, sizeof hex, "%02X", x);
    return "$" + body + "*" + hex;
  };

  SECTION("good line") {
    auto r = m.map(line("HOLF,1234,87,18.25"));
    REQUIRE(r.status == LineStatus::mapped);
    REQUIRE(r.channels.size() == 3);
    CHECK(r.channels[0].value == 1234.0);
    CHECK(r.channels[1].value == 87.0);
    CHECK(r.channels[2].value == 18.25);
  }
  SECTION("a garbled field spoils only its channel") {
    auto r = m.map(line("HOLF,1234,8#7,"));
    REQUIRE(r.status == LineStatus::mapped);
    CHECK(r.channels[0].fault == FieldFault::none);
    CHECK(r.channels[1].fault == FieldFault::not_numeric);
    CHECK_FALSE(r.channels[1].value);
    CHECK(r.channels[2].fault == FieldFault::empty);
    auto short_line = m.map(line("HOLF,1234"));
    CHECK(short_line.channels[1].fault == FieldFault::absent);
    CHECK(short_line.channels[2].fault == FieldFault::absent);
  }
  SECTION("a checksum failure spoils every channel") {
    std::string l = line("HOLF,1234,87,18.25");
    l[7] = '5';  // 1234 -> 1534: one digit changed in transit
    auto r = m.map(l);
    CHECK(r.status == LineStatus::garbled);
    REQUIRE(r.channels.size() == 3);
    for (const auto& ch : r.channels) {
      CHECK(ch.fault == FieldFault::checksum);
      CHECK_FALSE(ch.value);
    }
    CHECK(m.map("$HOLF,1234,87,18.25").status == LineStatus::garbled);  // required, absent
  }
  SECTION("other sentences are ignored") {
    auto r = m.map("$GPGGA,123519,4807.038,N,01131.000,E,1,08,0.9,545.4,M,46.9,M,,*47");
    CHECK(r.status == LineStatus::ignored);
    CHECK(r.channels.empty());
  }
}

TEST_CASE("FieldMapper checksum if present", "[line]") {
  LineFormat f;
  f.checksum = Checksum::if_present;
  f.channel_fields = {1};
  const FieldMapper m = mapper(f);
  CHECK(m.map("T,4.5").channels[0].value == 4.5);
  CHECK(m.map("$T,4.5").channels[0].value == 4.5);  // '$' stripped with checksums on
  CHECK(m.map("$T,4.5*00").status == LineStatus::garbled);
}

TEST_CASE("FieldMapper with whitespace runs", "[line]") {
  LineFormat f;
  f.split = Split::whitespace;
  f.channel_fields = {0, 2};
  const FieldMapper m = mapper(f);
  auto r = m.map("  21.5 \t ok   -3.25  ");
  CHECK(r.channels[0].value == 21.5);
  CHECK(r.channels[1].value == -3.25);
  CHECK(m.map("").channels[0].fault == FieldFault::absent);
}

TEST_CASE("FieldMapper with regex capture groups", "[line]") {
  LineFormat f;
  f.split = Split::regex;
  f.pattern = R"(CHL=(\S+) ug/L PC=(\S+) ug/L(?: T=(\S+))?)";
  f.channel_fields = {2, 1, 3};
  const FieldMapper m = mapper(f);
  auto r = m.map("> CHL=4.21 ug/L PC=0.87 ug/L T=17.9");
  REQUIRE(r.status == LineStatus::mapped);
  CHECK(r.channels[0].value == 0.87);
  CHECK(r.channels[1].value == 4.21);
  CHECK(r.channels[2].value == 17.9);
  auto no_t = m.map("CHL=4.21 ug/L PC=x ug/L");
  CHECK(no_t.channels[0].fault == FieldFault::not_numeric);
  CHECK(no_t.channels[2].fault == FieldFault::absent);
  auto none = m.map("HELLO");
  CHECK(none.status == LineStatus::garbled);
  CHECK(none.channels[0].fault == FieldFault::no_match);
}

TEST_CASE("FieldMapper refuses bad formats with one line", "[line]") {
  LineFormat f;
  f.split = Split::regex;
  f.pattern = "T=(";
  f.channel_fields = {1};
  auto bad = FieldMapper::create(f);
  REQUIRE_FALSE(bad);
  CHECK(bad.error().find("not a valid regular expression") != std::string::npos);
  f.pattern = "T=(\\d+)";
  f.channel_fields = {2};
  auto group = FieldMapper::create(f);
  REQUIRE_FALSE(group);
  CHECK(group.error() == "line pattern has 1 capture groups; channel field 2 is not one of 1..1");
  LineFormat empty;
  CHECK_FALSE(FieldMapper::create(empty));
  LineFormat nl;
  nl.delimiter = '\n';
  nl.channel_fields = {0};
  CHECK_FALSE(FieldMapper::create(nl));
}
