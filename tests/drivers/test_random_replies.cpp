// Each driver answered with random bytes (seeded, reproducible) on a pty: no
// crash, no value that did not come from a valid frame, bounded buffers
// (the sanitizer build checks memory). Complements the 100,000-input parser
// tests in tests/protocol, which run without a port.
#include <catch2/catch.hpp>

#include <random>

#include "drivers/protocol/crc.h"
#include "fake_instrument.h"

using namespace tarn;
using namespace tarn::test;
using drivers::ReadProblem;

namespace {

// Replies to anything with 0..300 random bytes; with probability 1/2 the
// reply ends in CR LF so line-based drivers see "lines".
FakeInstrument::Responder random_replies(std::uint32_t seed) {
  auto rng = std::make_shared<std::mt19937>(seed);
  return [rng](Bytes& in) {
    in.clear();
    std::uniform_int_distribution<int> len(0, 300), byte(0, 255), coin(0, 1);
    Bytes out(std::size_t(len(*rng)));
    for (auto& b : out) b = std::uint8_t(byte(*rng));
    if (coin(*rng)) {
      out.push_back('\r');
      out.push_back('\n');
    }
    return out;
  };
}

void hammer(const std::string& json, config::Line line, int polls) {
  TempDir dir;
  line.port = dir.path + "/noise";
  FakeInstrument fake(line.port, random_replies(12345));
  boost::asio::io_context io;
  auto drv = make_driver(test_instrument(json, line), line);
  drivers::SerialPort port(io, line);
  REQUIRE(port.open() == "");
  int with_value = 0;
  for (int i = 0; i < polls; ++i) {
    auto r = run_poll(io, port, *drv);
    for (auto& c : r.channels) {
      // A value exactly when the channel has no problem.
      REQUIRE(c.value.has_value() == (c.problem == ReadProblem::none));
      with_value += c.value.has_value();
    }
  }
  // Random bytes essentially never form a valid frame with the right CRC,
  // unit and function, so no value is produced.
  CHECK(with_value == 0);
}

}  // namespace

TEST_CASE("random replies: line driver", "[random]") {
  hammer(R"J({"driver": "line", "options": {"poll": "Q\r\n", "checksum": "nmea"},
    "channels": [{"source": {"field": 0}}, {"source": {"field": 1}}]})J",
         test_line("", 9600, 30, 0), 150);
}

TEST_CASE("random replies: modbus-rtu driver", "[random]") {
  hammer(R"J({"driver": "modbus-rtu", "options": {"unit": 9},
    "channels": [{"source": {"register": 0, "type": "f32"}}, {"source": {"register": 2}}]})J",
         test_line("", 19200, 30, 0), 150);
}

TEST_CASE("random replies: sdi12 driver", "[random]") {
  auto line = test_line("", 1200, 30, 0);
  line.data_bits = 7;
  line.parity = "even";
  hammer(R"J({"driver": "sdi12", "options": {"measure": "MC", "send_break": false},
    "channels": [{"source": {"value": 0}}]})J",
         line, 60);
}
