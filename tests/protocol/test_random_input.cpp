// 100,000 random byte strings into each protocol parser (seeded, reproducible).
// Asserts what must hold for any input: no value without a matching CRC or
// checksum (verified here with an independent bit-by-bit CRC), no parser asking
// for more than a maximal frame, the line buffer never above its cap. Run in the
// sanitizer build (-DTARN_SANITIZE=ON) for crash and memory checks.
#include <catch2/catch.hpp>

#include <algorithm>
#include <cctype>
#include <cmath>
#include <cstdint>
#include <random>
#include <string>
#include <vector>

#include "drivers/protocol/calibration.h"
#include "drivers/protocol/line_protocol.h"
#include "drivers/protocol/modbus_rtu.h"
#include "drivers/protocol/sdi12.h"

using namespace tarn::protocol;

namespace {

constexpr int runs = 100'000;

// Reference CRC, bit by bit (reflected poly 0xA001), independent of the table code.
std::uint16_t reference_crc16(const std::uint8_t* p, std::size_t n, std::uint16_t crc) {
  for (std::size_t i = 0; i < n; ++i) {
    crc ^= p[i];
    for (int b = 0; b < 8; ++b)
      crc = (crc & 1) ? static_cast<std::uint16_t>((crc >> 1) ^ 0xA001)
                      : static_cast<std::uint16_t>(crc >> 1);
  }
  return crc;
}

struct Random {
  std::mt19937 gen;
  explicit Random(std::uint32_t seed) : gen(seed) {}
  std::size_t below(std::size_t n) {
    return std::uniform_int_distribution<std::size_t>(0, n - 1)(gen);
  }
  std::uint8_t byte() { return static_cast<std::uint8_t>(below(256)); }
  // Mostly printable ASCII with some control and high bytes, as a noisy line gives.
  char text_char() {
    const std::size_t k = below(100);
    if (k < 3) return '\r';
    if (k < 6) return '\n';
    if (k < 10) return static_cast<char>(byte());
    static constexpr std::string_view common = "0123456789+-.,*$ ETCHLabcdefAF\t";
    if (k < 70) return common[below(common.size())];
    return static_cast<char>(0x20 + below(0x5F));
  }
  std::string text(std::size_t max_len) {
    std::string s(below(max_len + 1), '\0');
    for (char& c : s) c = text_char();
    return s;
  }
};

std::vector<std::uint8_t> modbus_reply(Random& r, const modbus::ReadRequest& req) {
  std::vector<std::uint8_t> b{req.unit, req.function, static_cast<std::uint8_t>(2 * req.count)};
  for (int i = 0; i < 2 * req.count; ++i) b.push_back(r.byte());
  const std::uint16_t crc = reference_crc16(b.data(), b.size(), 0xFFFF);
  b.push_back(static_cast<std::uint8_t>(crc & 0xFF));
  b.push_back(static_cast<std::uint8_t>(crc >> 8));
  return b;
}

}  // namespace

TEST_CASE("Modbus parser under 100,000 random byte strings", "[random][modbus]") {
  Random r(20240601);
  int ok = 0;
  for (int i = 0; i < runs; ++i) {
    const modbus::ReadRequest req{
        static_cast<std::uint8_t>(1 + r.below(247)),
        r.below(2) ? modbus::fn_read_holding_registers : modbus::fn_read_input_registers,
        static_cast<std::uint16_t>(r.below(1000)), static_cast<std::uint16_t>(1 + r.below(125))};
    std::vector<std::uint8_t> b;
    bool single_mutation = false;
    bool intact = false;
    switch (r.below(4)) {
      case 0:  // pure noise
        b.resize(r.below(300));
        for (auto& x : b) x = r.byte();
        break;
      case 1:  // plausible header, noise body
        b = modbus_reply(r, req);
        for (std::size_t k = 3; k < b.size(); ++k) b[k] = r.byte();
        break;
      case 2:  // a valid reply: the control that the good path is exercised
        b = modbus_reply(r, req);
        intact = true;
        break;
      default: {  // a valid reply with one byte changed, maybe truncated or extended
        b = modbus_reply(r, req);
        const std::size_t at = r.below(b.size());
        b[at] = static_cast<std::uint8_t>(b[at] ^ (1 + r.below(255)));
        single_mutation = true;
        if (r.below(4) == 0) b.resize(r.below(b.size() + 1));
        if (r.below(4) == 0) b.push_back(r.byte());
      }
    }
    const auto resp = modbus::parse_read_response(b, req);
    if (intact) {
      REQUIRE(resp.status == modbus::ResponseStatus::ok);
      for (std::size_t k = 0; k < req.count; ++k) {
        REQUIRE(resp.registers[k] == ((b[3 + 2 * k] << 8) | b[4 + 2 * k]));
      }
      continue;
    }
    if (b.size() >= modbus::max_frame_bytes)
      REQUIRE(resp.status != modbus::ResponseStatus::incomplete);
    if (resp.status != modbus::ResponseStatus::ok) {
      REQUIRE(resp.registers.empty());
      continue;
    }
    ++ok;
    REQUIRE_FALSE(single_mutation);  // CRC-16 detects every error burst of up to 16 bits
    REQUIRE(resp.frame_bytes <= b.size());
    REQUIRE(reference_crc16(b.data(), resp.frame_bytes, 0xFFFF) == 0);  // residue of a good frame
    REQUIRE(b[0] == req.unit);
    REQUIRE(b[1] == req.function);
    REQUIRE(resp.registers.size() == req.count);
  }
  // Noise essentially never passes a CRC (expected about 100000/2 * 2^-16 < 1).
  CHECK(ok <= 3);
}

TEST_CASE("SDI-12 parsers under 100,000 random strings", "[random][sdi12]") {
  Random r(1200);
  int crc_ok = 0;
  for (int i = 0; i < runs; ++i) {
    std::string s;
    bool single_mutation = false;
    const std::size_t mode = r.below(3);
    std::size_t n = 0;
    if (mode == 0) {
      s = r.text(90);
    } else {  // a valid CRC data reply; with mode 1 one character changed
      std::string body = "0";
      n = 1 + r.below(6);
      for (std::size_t k = 0; k < n; ++k) {
        body += r.below(2) ? '+' : '-';
        body += std::to_string(r.below(100000));
        if (r.below(2)) body += "." + std::to_string(r.below(100));
      }
      const auto c = sdi12::encode_crc(static_cast<std::uint16_t>(
          reference_crc16(reinterpret_cast<const std::uint8_t*>(body.data()), body.size(), 0)));
      s = body + std::string(c.data(), 3);
      if (mode == 1) {
        const std::size_t at = r.below(s.size());
        s[at] = static_cast<char>(s[at] ^ (1 + r.below(255)));
        single_mutation = true;
      }
    }
    (void)sdi12::parse_address_reply(s);
    (void)sdi12::parse_identify(s, '0');
    (void)sdi12::parse_measurement_reply(s, '0', sdi12::Measure::standard);
    (void)sdi12::parse_measurement_reply(s, '0', sdi12::Measure::concurrent);
    if (auto plain = sdi12::parse_data_reply(s, '0', false)) {
      for (double v : plain->values) REQUIRE(std::fabs(v) < 1e7);  // at most 7 digits
    }
    auto with_crc = sdi12::parse_data_reply(s, '0', true);
    if (mode == 2) {  // control: intact replies pass with all their values
      REQUIRE(with_crc);
      REQUIRE(with_crc->values.size() == n);
      continue;
    }
    if (!with_crc) continue;
    ++crc_ok;
    REQUIRE_FALSE(single_mutation);
    std::string_view body = s;
    if (body.ends_with("\r\n")) body.remove_suffix(2);
    const auto c = sdi12::encode_crc(
        reference_crc16(reinterpret_cast<const std::uint8_t*>(body.data()), body.size() - 3, 0));
    REQUIRE(body.substr(body.size() - 3) == std::string_view(c.data(), 3));
  }
  CHECK(crc_ok <= 3);
}

TEST_CASE("Line splitter and field mapper under 100,000 random strings", "[random][line]") {
  Random r(4096);
  line::LineSplitter splitter(64);
  line::LineFormat csv;
  csv.checksum = line::Checksum::required;
  csv.channel_fields = {1, 2, 3};
  auto csv_mapper = line::FieldMapper::create(csv);
  line::LineFormat rx;
  rx.split = line::Split::regex;
  rx.pattern = R"(T=([-+0-9.eE]+)\s*C=(\S*))";
  rx.channel_fields = {1, 2};
  auto rx_mapper = line::FieldMapper::create(rx);
  REQUIRE(csv_mapper);
  REQUIRE(rx_mapper);

  std::uint64_t delivered = 0, accepted = 0, intact_fed = 0, intact_mapped = 0;
  for (int i = 0; i < runs; ++i) {
    std::string bytes;
    bool single_mutation = false;
    const std::size_t mode = r.below(3);
    const double first = static_cast<double>(r.below(5000));
    if (mode == 0) {
      bytes = r.text(200);
    } else {  // a good checksummed line; with mode 1 one byte changed
      std::string body = "HOLF," + std::to_string(static_cast<int>(first)) + ",7.5,-1";
      unsigned x = 0;
      for (char ch : body) x ^= static_cast<unsigned char>(ch);
      static constexpr char hex[] = "0123456789ABCDEF";
      bytes = "$" + body + "*" + hex[x >> 4] + hex[x & 15];
      const std::size_t at = mode == 1 ? r.below(bytes.size()) : 0;
      char repl = static_cast<char>(bytes[at] ^ (1 + r.below(255)));
      // A hex digit in the other case is the same checksum: not a corruption.
      if (at + 2 >= bytes.size() && std::tolower(static_cast<unsigned char>(repl)) ==
                                        std::tolower(static_cast<unsigned char>(bytes[at]))) {
        repl = '#';
      }
      if (repl == '\r' || repl == '\n') repl = '#';  // keep it one line for this check
      if (mode == 1) bytes[at] = repl;
      bytes += "\r\n";
      single_mutation = mode == 1;
      splitter.reset();
    }
    if (mode == 2) ++intact_fed;
    splitter.feed(bytes, [&](std::string_view l) {
      ++delivered;
      REQUIRE(!l.empty());
      REQUIRE(l.size() <= splitter.max_line_bytes());
      REQUIRE(l.find_first_of("\r\n") == std::string_view::npos);
      const auto reading = csv_mapper->map(l);
      if (mode == 2) {  // control: intact lines are mapped with their values
        ++intact_mapped;
        REQUIRE(reading.status == line::LineStatus::mapped);
        REQUIRE(reading.channels[0].value == first);
        REQUIRE(reading.channels[1].value == 7.5);
        REQUIRE(reading.channels[2].value == -1.0);
        return;
      }
      if (reading.status == line::LineStatus::mapped) {
        ++accepted;
        INFO("line: " << std::string(l));
        REQUIRE_FALSE(single_mutation);
        // Independent check: XOR between '$' and the last '*' equals the hex after it.
        std::string_view t = l;
        while (!t.empty() && (t.back() == ' ' || t.back() == '\t')) t.remove_suffix(1);
        if (t.starts_with('$')) t.remove_prefix(1);
        const std::size_t star = t.rfind('*');
        REQUIRE(star != std::string_view::npos);
        unsigned x = 0;
        for (char ch : t.substr(0, star)) x ^= static_cast<unsigned char>(ch);
        REQUIRE(std::stoul(std::string(t.substr(star + 1)), nullptr, 16) == x);
      }
      for (const auto& ch : reading.channels) {
        REQUIRE(ch.value.has_value() == (ch.fault == line::FieldFault::none));
        if (ch.value) REQUIRE(std::isfinite(*ch.value));
      }
      for (const auto& ch : rx_mapper->map(l).channels) {
        if (ch.value) REQUIRE(std::isfinite(*ch.value));
      }
    });
    REQUIRE(splitter.pending_bytes() <= splitter.max_line_bytes());
  }
  CHECK(delivered > 0);
  CHECK(intact_mapped == intact_fed);
  CHECK(accepted <= 200);  // random text rarely carries a matching "*hh"
  CHECK(splitter.overlong_lines() > 0);
}

TEST_CASE("Calibrations under 100,000 random readings", "[random][calibration]") {
  Random r(60751);
  std::uniform_real_distribution<double> wide(-1e6, 1e6);
  const calibration::CallendarVanDusen pt100{};
  const calibration::SteinhartHart sh{1.032e-3, 2.387e-4, 1.580e-7};
  int converged = 0;
  for (int i = 0; i < runs; ++i) {
    const double x =
        r.below(2) ? wide(r.gen) : std::uniform_real_distribution<double>(0, 500)(r.gen);
    if (auto t = calibration::apply(pt100, x)) {
      ++converged;
      REQUIRE(*t >= calibration::cvd_min_celsius - 1e-6);
      REQUIRE(*t <= calibration::cvd_max_celsius + 1e-6);
      REQUIRE(std::fabs(calibration::cvd_resistance(pt100, std::clamp(*t, -200.0, 850.0)).value() -
                        x) < 1e-6);
    } else {
      REQUIRE(calibration::apply(pt100, x).error() == calibration::CalError::out_of_domain);
    }
    if (auto t = calibration::apply(sh, x)) REQUIRE(std::isfinite(*t));
  }
  CHECK(converged > runs / 4);
}
