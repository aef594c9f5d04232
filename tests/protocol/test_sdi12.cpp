#include <catch2/catch.hpp>

#include <string>

#include "drivers/protocol/sdi12.h"

using namespace tarn::protocol;
using namespace tarn::protocol::sdi12;

namespace {

// Appends the SDI-12 CRC characters to a reply body.
std::string with_crc(std::string body) {
  const auto c = encode_crc(crc_of(body));
  body.append(c.data(), c.size());
  return body;
}

}  // namespace

TEST_CASE("SDI-12 addresses and command builders", "[sdi12]") {
  CHECK(is_valid_address('0'));
  CHECK(is_valid_address('9'));
  CHECK(is_valid_address('a'));
  CHECK(is_valid_address('Z'));
  CHECK_FALSE(is_valid_address('?'));
  CHECK_FALSE(is_valid_address(' '));
  CHECK_FALSE(is_valid_address('!'));

  CHECK(acknowledge_active('0') == "0!");
  CHECK(address_query() == "?!");
  CHECK(identify('3') == "3I!");
  CHECK(change_address('0', '5') == "0A5!");
  CHECK(start_measurement('0') == "0M!");
  CHECK(start_measurement('0', {Measure::standard, true, 0}) == "0MC!");
  CHECK(start_measurement('1', {Measure::standard, false, 2}) == "1M2!");
  CHECK(start_measurement('1', {Measure::standard, true, 9}) == "1MC9!");
  CHECK(start_measurement('b', {Measure::concurrent, false, 0}) == "bC!");
  CHECK(start_measurement('b', {Measure::concurrent, true, 0}) == "bCC!");
  for (unsigned i = 0; i <= 9; ++i) {
    CHECK(send_data('0', i) == std::string{'0', 'D', static_cast<char>('0' + i), '!'});
  }
  CHECK_THROWS_AS(send_data('0', 10), std::invalid_argument);
  CHECK_THROWS_AS(identify('*'), std::invalid_argument);
  CHECK_THROWS_AS(start_measurement('0', {Measure::standard, false, 10}), std::invalid_argument);
}

TEST_CASE("SDI-12 CRC", "[sdi12]") {
  // SDI-12 v1.4 §4.4.12.3 example (from memory): command 0D0! answered by
  // "0+3.14OqZ<CR><LF>" where "OqZ" encodes the CRC-16/ARC of "0+3.14".
  CHECK(crc_of("123456789") == 0xBB3D);  // CRC-16/ARC check value (CRC catalogue, reveng)
  const auto c = encode_crc(crc_of("0+3.14"));
  CHECK(std::string(c.data(), 3) == "OqZ");
  CHECK(crc_matches("0+3.14OqZ"));
  CHECK_FALSE(crc_matches("0+3.15OqZ"));
  CHECK_FALSE(crc_matches("0+3.14OqY"));
  CHECK_FALSE(crc_matches("OqZ"));  // nothing before the CRC
  // Every character is 0x40 | 6 bits, so always printable 0x40..0x7F.
  for (unsigned v : {0u, 0xFFFFu, 0x1234u, 0xF000u}) {
    for (char ch : encode_crc(static_cast<std::uint16_t>(v))) {
      CHECK((static_cast<unsigned char>(ch) & 0xC0) == 0x40);
    }
  }
  CHECK(std::string(encode_crc(0xFFFF).data(), 3) == "O\x7F\x7F");
  // A reply whose CRC contains 0x7F (DEL) is still a valid CRC reply; DEL elsewhere is not.
  std::string del_reply;
  for (int v = 0; v < 100000 && del_reply.empty(); ++v) {
    const std::string body = "0+" + std::to_string(v);
    const auto crc = encode_crc(crc_of(body));
    if (crc[2] == '\x7F') del_reply = body + std::string(crc.data(), 3);
  }
  REQUIRE_FALSE(del_reply.empty());
  CHECK(parse_data_reply(del_reply, '0', true));
  CHECK(parse_data_reply("0+1\x7F", '0', false).error() == ReplyError::bad_character);
}

TEST_CASE("SDI-12 address replies and service requests", "[sdi12]") {
  CHECK(parse_address_reply("0\r\n").value() == '0');
  CHECK(parse_address_reply("7").value() == '7');
  CHECK(parse_address_reply("").error() == ReplyError::empty);
  CHECK(parse_address_reply("\r\n").error() == ReplyError::empty);
  CHECK(parse_address_reply("00\r\n").error() == ReplyError::bad_length);
  CHECK(parse_address_reply("#\r\n").error() == ReplyError::bad_address);
  CHECK(parse_address_reply("0\n").error() == ReplyError::bad_character);  // LF without CR
  CHECK(parse_address_reply("\xff").error() == ReplyError::bad_character);
}

TEST_CASE("SDI-12 identify reply", "[sdi12]") {
  // Field layout of v1.4 §4.4.2: a ll cccccccc mmmmmm vvv xxx (up to 13). Invented
  // sensor of the demo station.
  auto id = parse_identify("014HOLLINLBTHERM1001SN-0042\r\n", '0');
  REQUIRE(id);
  CHECK(id->address == '0');
  CHECK(id->sdi12_version == "14");
  CHECK(id->vendor == "HOLLINLB");
  CHECK(id->model == "THERM1");
  CHECK(id->sensor_version == "001");
  CHECK(id->serial == "SN-0042");

  auto bare = parse_identify("513HOLLIN  PROBE 2.0", '5');  // no serial, padded vendor
  REQUIRE(bare);
  CHECK(bare->vendor == "HOLLIN  ");
  CHECK(bare->model == "PROBE ");
  CHECK(bare->sensor_version == "2.0");
  CHECK(bare->serial.empty());

  CHECK(parse_identify("014HOLLINLBTHERM100", '0').error() == ReplyError::bad_length);  // 19 chars
  CHECK(parse_identify("014HOLLINLBTHERM1001ABCDEFGHIJKLMN", '0').error() ==
        ReplyError::bad_length);  // 14-char serial
  CHECK(parse_identify("0X4HOLLINLBTHERM1001", '0').error() == ReplyError::bad_field);
  CHECK(parse_identify("114HOLLINLBTHERM1001", '0').error() == ReplyError::wrong_address);
  CHECK(parse_identify("014HOLLIN\tBTHERM1001", '0').error() == ReplyError::bad_character);
}

TEST_CASE("SDI-12 measurement replies", "[sdi12]") {
  auto m = parse_measurement_reply("00053\r\n", '0', Measure::standard);
  REQUIRE(m);
  CHECK(m->seconds == 5);
  CHECK(m->count == 3);
  auto c = parse_measurement_reply("312012", '3', Measure::concurrent);
  REQUIRE(c);
  CHECK(c->seconds == 120);
  CHECK(c->count == 12);
  auto zero = parse_measurement_reply("00000", '0', Measure::standard);
  REQUIRE(zero);
  CHECK(zero->count == 0);

  CHECK(parse_measurement_reply("0005", '0', Measure::standard).error() == ReplyError::bad_length);
  CHECK(parse_measurement_reply("000531", '0', Measure::standard).error() ==
        ReplyError::bad_length);
  CHECK(parse_measurement_reply("00053", '0', Measure::concurrent).error() ==
        ReplyError::bad_length);
  CHECK(parse_measurement_reply("00A53", '0', Measure::standard).error() == ReplyError::bad_field);
  CHECK(parse_measurement_reply("10053", '0', Measure::standard).error() ==
        ReplyError::wrong_address);
}

TEST_CASE("SDI-12 data replies", "[sdi12]") {
  SECTION("signed values as in the spec's examples") {
    auto d = parse_data_reply("0+3.14+2.718\r\n", '0', false);
    REQUIRE(d);
    REQUIRE(d->values.size() == 2);
    CHECK(d->values[0] == Approx(3.14));
    CHECK(d->values[1] == Approx(2.718));
    auto n = parse_data_reply("1-0.5+12-7.+.25+1234567", '1', false);
    REQUIRE(n);
    CHECK(n->values == std::vector<double>{-0.5, 12.0, -7.0, 0.25, 1234567.0});
    auto none = parse_data_reply("0\r\n", '0', false);
    REQUIRE(none);
    CHECK(none->values.empty());
  }
  SECTION("the spec's CRC example") {
    auto d = parse_data_reply("0+3.14OqZ\r\n", '0', true);
    REQUIRE(d);
    CHECK(d->values == std::vector<double>{3.14});
  }
  SECTION("bad values") {
    CHECK(parse_data_reply("0+12345678", '0', false).error() == ReplyError::bad_value);  // 8 digits
    CHECK(parse_data_reply("03.14", '0', false).error() == ReplyError::bad_value);       // no sign
    CHECK(parse_data_reply("0+1.2.3", '0', false).error() == ReplyError::bad_value);
    CHECK(parse_data_reply("0+", '0', false).error() == ReplyError::bad_value);
    CHECK(parse_data_reply("0+.", '0', false).error() == ReplyError::bad_value);
    CHECK(parse_data_reply("0+1e5", '0', false).error() == ReplyError::bad_value);
    CHECK(parse_data_reply("0+1 ", '0', false).error() == ReplyError::bad_value);
    CHECK(parse_data_reply("0+1\r\r\n", '0', false).error() == ReplyError::bad_character);
    CHECK(parse_data_reply("1+1", '0', false).error() == ReplyError::wrong_address);
    std::string too_long = "0";
    for (int i = 0; i < 19; ++i) too_long += "+1.2";  // 76 characters of values, limit 75
    CHECK(parse_data_reply(too_long, '0', false).error() == ReplyError::bad_length);
  }
  SECTION("CRC faults") {
    const std::string good = with_crc("0+21.37-0.004");
    REQUIRE(parse_data_reply(good, '0', true));
    std::string flipped = good;
    flipped[3] = '3';  // "+23.37": value changed, CRC unchanged
    CHECK(parse_data_reply(flipped, '0', true).error() == ReplyError::crc_mismatch);
    std::string bad_crc = good;
    bad_crc.back() = static_cast<char>(bad_crc.back() ^ 0x01);
    CHECK(parse_data_reply(bad_crc, '0', true).error() == ReplyError::crc_mismatch);
    CHECK(parse_data_reply("0+21.37-0.004", '0', true).error() == ReplyError::crc_mismatch);
    CHECK(parse_data_reply("0Oq", '0', true).error() == ReplyError::bad_length);
    // A reply with a CRC read as one without: the CRC characters are not values.
    CHECK(parse_data_reply(good, '0', false).error() == ReplyError::bad_value);
  }
}

TEST_CASE("SDI-12 data collection over aD0..aD9", "[sdi12]") {
  SECTION("values spread over two data commands") {
    DataCollector c('0', 3, false);
    REQUIRE(c.next_command() == "0D0!");
    CHECK(c.accept("0+1.5+2.5\r\n").value() == DataCollector::State::collecting);
    REQUIRE(c.next_command() == "0D1!");
    CHECK(c.accept("0-3\r\n").value() == DataCollector::State::complete);
    CHECK_FALSE(c.next_command());
    CHECK(c.values() == std::vector<double>{1.5, 2.5, -3.0});
  }
  SECTION("with CRC") {
    DataCollector c('2', 1, true);
    CHECK(c.accept(with_crc("2+9.81")).value() == DataCollector::State::complete);
    CHECK(c.values() == std::vector<double>{9.81});
  }
  SECTION("a bad CRC fails the collection and returns no values") {
    DataCollector c('0', 1, true);
    CHECK(c.accept("0+3.14OqY").error() == ReplyError::crc_mismatch);
    CHECK(c.state() == DataCollector::State::failed);
    CHECK(c.values().empty());
    CHECK_FALSE(c.next_command());
  }
  SECTION("sensor runs out of values") {
    DataCollector c('0', 4, false);
    c.accept("0+1+2");
    CHECK(c.accept("0").value() == DataCollector::State::short_of_values);
    CHECK(c.values().size() == 2);
  }
  SECTION("more values than announced") {
    DataCollector c('0', 1, false);
    CHECK(c.accept("0+1+2").error() == ReplyError::too_many_values);
    CHECK(c.state() == DataCollector::State::failed);
  }
  SECTION("one value per command stops after aD9") {
    DataCollector c('0', 20, false);
    int sent = 0;
    while (auto cmd = c.next_command()) {
      ++sent;
      c.accept("0+1");
    }
    CHECK(sent == 10);
    CHECK(c.state() == DataCollector::State::short_of_values);
  }
  SECTION("zero values announced: nothing to ask") {
    DataCollector c('0', 0, false);
    CHECK(c.state() == DataCollector::State::complete);
    CHECK_FALSE(c.next_command());
  }
}

TEST_CASE("SDI-12 retry plan and timeouts", "[sdi12]") {
  using us = std::chrono::microseconds;
  const RetryPolicy p;
  const auto plan = attempt_plan(p);
  REQUIRE(plan.size() == 8);  // (break + cmd, 3 retries) x 2 cycles
  CHECK(plan[0].send_break);
  CHECK_FALSE(plan[1].send_break);
  CHECK_FALSE(plan[3].send_break);
  CHECK(plan[4].send_break);
  for (const auto& a : plan) {
    // The recorder waits at least 16.67 ms for a reply to start (v1.4 §7, from memory),
    // which is longer than the sensor's 15 ms, and retries before the sensor sleeps.
    CHECK(a.wait_for_reply_start >= p.reply_start_max);
    CHECK(a.wait_for_reply_start < p.retry_within);
  }
  // 1200 baud 7E1: 10 bits = 8.333 ms per character. "0+3.14OqZ\r\n" is 11 chars.
  CHECK(character_time == us(8333));
  CHECK(reply_timeout(11) == us(15000 + 12 * 8333));
  RetryPolicy one{};
  one.break_cycles = 1;
  one.retries_per_break = 0;
  CHECK(attempt_plan(one).size() == 1);
}
