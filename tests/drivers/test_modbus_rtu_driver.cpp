// The modbus-rtu driver against a fake RTU server on a pty: register map
// decoding, request grouping, exceptions by name, CRC and framing faults, a
// late reply, a reply from another unit, unplug. The fake's frame layout
// follows the Modbus specs named in fake_modbus.h; the real-world check
// against python3-pymodbus is tests/integration/test_drivers_pymodbus.py.
#include <catch2/catch.hpp>

#include "fake_modbus.h"

using namespace tarn;
using namespace tarn::test;
using drivers::ReadProblem;
using Fault = FakeModbusBus::Fault;

namespace {

// Thermistor chain: 4 depths as f32 resistance in input registers 0..7 and a
// status word in holding register 100.
const char* chain_json = R"J({"name": "chain", "driver": "modbus-rtu",
  "options": {"unit": 7, "function": 4},
  "channels": [
    {"name": "t0", "source": {"register": 0, "type": "f32"},
     "calibration": {"kind": "steinhart_hart", "a": 1.032e-3, "b": 2.387e-4, "c": 1.58e-7}},
    {"name": "t1", "source": {"register": 2, "type": "f32"}},
    {"name": "t2", "source": {"register": 4, "type": "f32", "word_order": "low_first"}},
    {"name": "t3", "source": {"register": 6, "type": "s16", "scale": 0.01, "offset": -5}},
    {"name": "st", "source": {"register": 100, "function": 3, "type": "u16"}}]})J";

struct Rig {
  TempDir dir;
  FakeModbusBus bus{dir.path + "/chain"};
  boost::asio::io_context io;
  config::Line line = test_line(dir.path + "/chain", 19200, 200, 1);
  std::unique_ptr<drivers::InstrumentDriver> drv;
  std::unique_ptr<drivers::SerialPort> port;

  Rig() {
    line.parity = "even";
    auto& u = bus.unit(7);
    FakeModbusBus::put_f32(u.input, 0, 10000.0f);  // 10 kohm: 25 degC on this thermistor
    FakeModbusBus::put_f32(u.input, 2, 12.5f);
    FakeModbusBus::put_f32(u.input, 4, -3.25f, false);
    u.input[6] = std::uint16_t(std::int16_t(-150));  // -1.50 -> -6.50 after offset
    u.holding[100] = 42;
    drv = make_driver(test_instrument(chain_json, line), line);
    port = std::make_unique<drivers::SerialPort>(io, line);
    REQUIRE(port->open() == "");
  }
  drivers::PollResult poll(drivers::ExchangeLog* log = nullptr) {
    return run_poll(io, *port, *drv, log);
  }
};

}  // namespace

TEST_CASE("modbus-rtu: register map, grouping, calibration", "[modbus]") {
  Rig rig;
  drivers::ExchangeLog log;
  auto r = rig.poll(&log);
  INFO(r.error);
  REQUIRE(r.channels.size() == 5);
  for (auto& c : r.channels) CHECK(c.problem == ReadProblem::none);
  // YSI 44006-type 10 kohm thermistor coefficients (the set the protocol tests
  // check against the maker's table): 10000 ohm is 25.00 degC.
  CHECK(*r.channels[0].value == Approx(25.0).margin(0.01));
  CHECK(*r.channels[1].value == Approx(12.5));
  CHECK(*r.channels[2].value == Approx(-3.25));
  CHECK(*r.channels[3].value == Approx(-6.5));
  CHECK(*r.channels[4].value == 42);
  // Holding 100 in one request, input registers 0..6 (7 registers) in the other
  // (requests go in function, then register order).
  REQUIRE(log.entries.size() == 4);
  const Bytes& holding = log.entries[0].second;
  const Bytes& input = log.entries[2].second;
  CHECK(Bytes(holding.begin(), holding.begin() + 6) == Bytes({7, 3, 0, 100, 0, 1}));
  CHECK(Bytes(input.begin(), input.begin() + 6) == Bytes({7, 4, 0, 0, 0, 7}));
  CHECK(rig.bus.requests() == 2);
}

TEST_CASE("modbus-rtu: exception reply is reported by name and not retried", "[modbus]") {
  Rig rig;
  rig.bus.unit(7).holding.erase(100);
  auto r = rig.poll();
  CHECK(r.channels[0].problem == ReadProblem::none);
  CHECK(r.channels[4].problem == ReadProblem::instrument_error);
  // Exception code 02 is ILLEGAL DATA ADDRESS (Modbus Application Protocol V1.1b3 §7).
  CHECK(r.error.find("ILLEGAL DATA ADDRESS") != std::string::npos);
  CHECK(r.error.find("registers 100..100") != std::string::npos);
  CHECK(rig.bus.requests() == 2);
}

TEST_CASE("modbus-rtu: wrong CRC, truncated frame, garbage, timeout", "[modbus]") {
  Rig rig;
  SECTION("one bad CRC is retried") {
    rig.bus.set_fault(Fault::bad_crc, 1);
    auto r = rig.poll();
    CHECK(r.channels[0].problem == ReadProblem::none);
    CHECK(rig.bus.requests() == 3);
  }
  SECTION("CRC always wrong: garbled, no values") {
    rig.bus.set_fault(Fault::bad_crc);
    auto r = rig.poll();
    for (auto& c : r.channels) {
      CHECK(c.problem == ReadProblem::garbled);
      CHECK_FALSE(c.value);
    }
    CHECK(r.error.find("CRC") != std::string::npos);
  }
  SECTION("truncated frame: no reply in time, says truncated") {
    rig.bus.set_fault(Fault::truncated);
    auto r = rig.poll();
    for (auto& c : r.channels) CHECK(c.problem == ReadProblem::no_reply);
    CHECK(r.error.find("truncated") != std::string::npos);
  }
  SECTION("garbage bytes") {
    rig.bus.set_fault(Fault::garbage);
    auto r = rig.poll();
    for (auto& c : r.channels) CHECK(c.problem != ReadProblem::none);
    for (auto& c : r.channels) CHECK_FALSE(c.value);
  }
  SECTION("dead unit: timeout x (1 + retries) per request") {
    rig.bus.unit(7).mute = true;
    auto t0 = std::chrono::steady_clock::now();
    auto r = rig.poll();
    auto took = std::chrono::steady_clock::now() - t0;
    for (auto& c : r.channels) CHECK(c.problem == ReadProblem::no_reply);
    CHECK(took >= std::chrono::milliseconds(4 * 200));
    CHECK(took < std::chrono::milliseconds(4 * 200 + 400));
  }
  SECTION("a CRC-valid frame from another unit is skipped, never taken") {
    rig.bus.set_fault(Fault::wrong_unit);
    auto r = rig.poll();
    for (auto& c : r.channels) CHECK(c.problem == ReadProblem::no_reply);
  }
}

TEST_CASE("modbus-rtu: a late reply is not taken for the next request's answer", "[modbus]") {
  Rig rig;
  rig.line.retries = 0;
  drivers::SerialPort port(rig.io, rig.line);
  rig.port->close();
  REQUIRE(port.open() == "");
  auto drv = make_driver(test_instrument(R"J({"driver": "modbus-rtu", "options": {"unit": 7},
    "channels": [{"source": {"register": 100}}]})J",
                                         rig.line),
                         rig.line);
  rig.bus.set_late_ms(300);
  rig.bus.set_fault(Fault::late, 1);
  auto r = run_poll(rig.io, port, *drv);
  CHECK(r.channels[0].problem == ReadProblem::no_reply);
  rig.bus.unit(7).holding[100] = 43;  // the next answer differs from the late one (42)
  std::this_thread::sleep_for(std::chrono::milliseconds(250));  // the late "42" arrives now
  r = run_poll(rig.io, port, *drv);
  REQUIRE(r.channels[0].value);
  CHECK(*r.channels[0].value == 43);
}

TEST_CASE("modbus-rtu: unplug and replug", "[modbus]") {
  Rig rig;
  CHECK(rig.poll().channels[0].problem == ReadProblem::none);
  rig.bus.pty().unplug();
  auto r = rig.poll();
  for (auto& c : r.channels) CHECK(c.problem == ReadProblem::offline);
  rig.port->close();
  rig.bus.pty().replug();
  REQUIRE(rig.port->open() == "");
  CHECK(rig.poll().channels[0].problem == ReadProblem::none);
}

TEST_CASE("modbus-rtu: options are validated with pointers", "[modbus][config]") {
  auto line = test_line("/dev/null");
  auto p = validate_instrument(R"J({"driver": "modbus-rtu", "options": {"unit": 0},
    "channels": [{"source": {"register": 65535, "type": "f32", "word_order": "middle"}}]})J",
                               line);
  std::string all = p.render("f");
  INFO(all);
  CHECK(all.find("/instruments/0/options/unit") != std::string::npos);
  CHECK(all.find("/instruments/0/channels/0/source/word_order") != std::string::npos);
  CHECK(all.find("runs past register 65535") != std::string::npos);
  line.data_bits = 7;
  p = validate_instrument(R"J({"driver": "modbus-rtu", "options": {"unit": 1},
    "channels": [{"source": {"register": 1}}]})J",
                          line);
  CHECK(p.render("f").find("/lines/0/data_bits") != std::string::npos);
}
