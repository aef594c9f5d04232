// The sdi12 driver against a fake SDI-12 sensor (behind a transparent adapter)
// on a pty: measure, service request, data, the CRC variant, identify, the
// retry plan, a dead sensor, unplug. The fake's reply formats follow the
// SDI-12 specification v1.4 (§4.4: aM! -> atttn, aC! -> atttnn, aD0! ->
// a<values>, aI! -> allccccccccmmmmmmvvvxxx; section numbers from memory). Its
// CRC is its own bitwise CRC-16/ARC (poly 0xA001 reflected, init 0), encoded as
// three characters 0x40|bits (spec §4.4.12, from memory), independent of the
// code under test; its check value is asserted below.
#include <catch2/catch.hpp>

#include <atomic>
#include <cstdio>

#include "fake_instrument.h"

using namespace tarn;
using namespace tarn::test;
using drivers::ReadProblem;

namespace {

std::uint16_t arc_crc(const std::string& s) {
  std::uint16_t crc = 0;
  for (unsigned char ch : s) {
    crc ^= ch;
    for (int i = 0; i < 8; ++i) crc = (crc & 1) ? std::uint16_t((crc >> 1) ^ 0xA001) : crc >> 1;
  }
  return crc;
}

std::string with_crc(const std::string& s) {
  std::uint16_t c = arc_crc(s);
  std::string out = s;
  out += char(0x40 | (c >> 12));
  out += char(0x40 | ((c >> 6) & 0x3F));
  out += char(0x40 | (c & 0x3F));
  return out;
}

struct FakeSdi12 {
  std::atomic<bool> mute{false};
  std::atomic<int> bad_crc{0};       // corrupt the next N data replies' CRC
  std::atomic<int> ignore_first{0};  // ignore the next N commands (retry plan)
  std::atomic<int> ready_ms{300};    // service request after this long
  std::atomic<bool> send_service_request{true};
  std::atomic<int> commands{0};
  std::atomic<int> truncate_data{0};  // the next N data replies lose their tail and line end
  std::atomic<bool> babble{false};    // answers every command with 20 kB and no line end
  std::atomic<int> late_data_ms{0};   // the next data reply comes this late, then 0 again
  std::unique_ptr<FakeInstrument> pty;

  explicit FakeSdi12(const std::string& link) {
    pty = std::make_unique<FakeInstrument>(link, [this](Bytes& in) { return answer(in); });
  }

  Bytes answer(Bytes& in) {
    Bytes out;
    for (;;) {
      auto bang = std::find(in.begin(), in.end(), '!');
      if (bang == in.end()) return out;
      std::string cmd(in.begin(), bang + 1);
      in.erase(in.begin(), bang + 1);
      ++commands;
      if (mute || ignore_first > 0) {
        if (ignore_first > 0) --ignore_first;
        continue;
      }
      if (babble) {
        out.insert(out.end(), 20000, 'A');
        continue;
      }
      std::string r = reply(cmd);
      if (!r.empty() && cmd.size() == 4 && cmd[1] == 'D') {
        if (truncate_data > 0) {
          --truncate_data;
          r = r.substr(0, 5);  // "0+17." : cut mid-value, no CR LF
        } else if (int ms = late_data_ms.exchange(0); ms > 0) {
          FakeInstrument* p = pty.get();
          std::string late = "0+99.5-9.5\r\n";  // a stale answer, distinct from the real one
          std::thread([p, ms, late] {
            std::this_thread::sleep_for(std::chrono::milliseconds(ms));
            p->send(bytes_of(late));
          }).detach();
          r.clear();
        }
      }
      if (!r.empty()) out.insert(out.end(), r.begin(), r.end());
    }
  }

  std::string reply(const std::string& cmd) {
    if (cmd == "0!" || cmd == "?!") return "0\r\n";  // ?!: the address query (one sensor)
    if (cmd == "0I!") return "014HOLLINLKTP100 1.0SN0042\r\n";  // invented vendor/model
    if (cmd == "0M!" || cmd == "0MC!") {
      if (send_service_request) {
        FakeInstrument* p = pty.get();
        int ms = ready_ms;
        std::thread([p, ms] {
          std::this_thread::sleep_for(std::chrono::milliseconds(ms));
          p->send(bytes_of("0\r\n"));
        }).detach();
      }
      crc_ = cmd == "0MC!";
      return "00023\r\n";  // ready within 2 s, 3 values
    }
    if (cmd == "0C!") {
      crc_ = false;
      return "000103\r\n";  // 1 s, 3 values, no service request
    }
    if (cmd == "0D0!") {
      std::string body = "0+17.25-0.5";
      if (!crc_) return body + "\r\n";
      std::string s = with_crc(body);
      if (bad_crc > 0) {
        --bad_crc;
        s.back() = s.back() == 'A' ? 'B' : 'A';
      }
      return s + "\r\n";
    }
    if (cmd == "0D1!") return (crc_ ? with_crc("0+101.5") : std::string("0+101.5")) + "\r\n";
    return "";
  }
  bool crc_ = false;
};

struct Rig {
  TempDir dir;
  FakeSdi12 fake{dir.path + "/probe"};
  boost::asio::io_context io;
  config::Line line = test_line(dir.path + "/probe", 1200, 150, 1);
  std::unique_ptr<drivers::SerialPort> port;

  Rig() {
    line.data_bits = 7;
    line.parity = "even";
    port = std::make_unique<drivers::SerialPort>(io, line);
    REQUIRE(port->open() == "");
  }
  std::unique_ptr<drivers::InstrumentDriver> driver(const std::string& measure) {
    return make_driver(test_instrument(R"J({"driver": "sdi12",
      "options": {"address": "0", "measure": ")J" +
                                           measure + R"J("},
      "channels": [{"source": {"value": 0}}, {"source": {"value": 1}},
                   {"source": {"value": 2},
                    "calibration": {"kind": "callendar_van_dusen", "r0": 100}}]})J",
                                       line),
                       line);
  }
};

}  // namespace

TEST_CASE("SDI-12 fake's CRC-16/ARC check value", "[sdi12]") {
  // CRC-16/ARC of "123456789" is 0xBB3D (CRC catalogue check value).
  CHECK(arc_crc("123456789") == 0xBB3D);
}

TEST_CASE("sdi12: aM!, service request, aD0!/aD1!, calibration", "[sdi12]") {
  Rig rig;
  auto drv = rig.driver("M");
  drivers::ExchangeLog log;
  auto t0 = std::chrono::steady_clock::now();
  auto r = run_poll(rig.io, *rig.port, *drv, &log);
  auto took = std::chrono::steady_clock::now() - t0;
  INFO(r.error);
  CHECK(*r.channels[0].value == Approx(17.25));
  CHECK(*r.channels[1].value == Approx(-0.5));
  // 101.5 ohm on a PT100 is about 3.84 degC (IEC 60751 R(t), from the protocol tests).
  CHECK(*r.channels[2].value == Approx(3.84).margin(0.01));
  // The service request after 300 ms ends the wait, not the announced 2 s.
  CHECK(took >= std::chrono::milliseconds(300));
  CHECK(took < std::chrono::milliseconds(1500));
  REQUIRE(log.entries.size() >= 6);
  CHECK(text_of(log.entries[0].second) == "0M!");
}

TEST_CASE("sdi12: no service request: waits the announced seconds", "[sdi12]") {
  Rig rig;
  rig.fake.send_service_request = false;
  auto drv = rig.driver("M");
  auto t0 = std::chrono::steady_clock::now();
  auto r = run_poll(rig.io, *rig.port, *drv);
  auto took = std::chrono::steady_clock::now() - t0;
  CHECK(r.channels[0].problem == ReadProblem::none);
  CHECK(took >= std::chrono::milliseconds(2000));  // ttt = 002, real time
  CHECK(took < std::chrono::milliseconds(3500));
}

TEST_CASE("sdi12: concurrent measurement waits ttt", "[sdi12]") {
  Rig rig;
  auto drv = rig.driver("C");
  auto t0 = std::chrono::steady_clock::now();
  auto r = run_poll(rig.io, *rig.port, *drv);
  CHECK(std::chrono::steady_clock::now() - t0 >= std::chrono::milliseconds(1000));
  CHECK(*r.channels[1].value == Approx(-0.5));
}

TEST_CASE("sdi12: CRC variant verified, bad CRC asked again, then garbled", "[sdi12]") {
  Rig rig;
  auto drv = rig.driver("MC");
  auto r = run_poll(rig.io, *rig.port, *drv);
  INFO(r.error);
  CHECK(*r.channels[0].value == Approx(17.25));
  rig.fake.bad_crc = 1;  // one corrupted reply: the retry gets a good one
  r = run_poll(rig.io, *rig.port, *drv);
  CHECK(r.channels[0].problem == ReadProblem::none);
  rig.fake.bad_crc = 100;  // always corrupted: no value is ever taken
  r = run_poll(rig.io, *rig.port, *drv);
  for (auto& c : r.channels) {
    CHECK(c.problem == ReadProblem::garbled);
    CHECK_FALSE(c.value);
  }
  CHECK(r.error.find("0D0!") != std::string::npos);
}

TEST_CASE("sdi12: retry plan, dead sensor, identify, unplug", "[sdi12]") {
  Rig rig;
  auto drv = rig.driver("M");
  rig.fake.ignore_first = 2;  // the first two tries go unanswered
  auto r = run_poll(rig.io, *rig.port, *drv);
  CHECK(r.channels[0].problem == ReadProblem::none);

  // Identify: a ll cccccccc mmmmmm vvv serial.
  CHECK(run_identify(rig.io, *rig.port, *drv) ==
        "address query ?!: '0' answers; SDI-12 1.4, vendor \"HOLLINLK\", model \"TP100 \", "
        "version \"1.0\", serial \"SN0042\"");

  // Dead sensor: (break + 3 retries) x (1 + line retries) = 8 tries of 150 ms.
  rig.fake.mute = true;
  const int before = rig.fake.commands;
  auto t0 = std::chrono::steady_clock::now();
  r = run_poll(rig.io, *rig.port, *drv);
  auto took = std::chrono::steady_clock::now() - t0;
  for (auto& c : r.channels) CHECK(c.problem == ReadProblem::no_reply);
  std::this_thread::sleep_for(std::chrono::milliseconds(50));
  CHECK(rig.fake.commands - before == 8);
  CHECK(took >= std::chrono::milliseconds(8 * 150));
  CHECK(took < std::chrono::milliseconds(8 * 150 + 800));

  rig.fake.mute = false;
  rig.fake.pty->unplug();
  r = run_poll(rig.io, *rig.port, *drv);
  for (auto& c : r.channels) CHECK(c.problem == ReadProblem::offline);
}

TEST_CASE("sdi12: truncated reply, late reply, babbling line, replug", "[sdi12]") {
  Rig rig;
  auto drv = rig.driver("M");

  // Truncated data reply (no line end): the try times out, the retry plan asks
  // again and takes the whole reply.
  rig.fake.truncate_data = 1;
  auto r = run_poll(rig.io, *rig.port, *drv);
  INFO(r.error);
  REQUIRE(r.channels[0].value);
  CHECK(*r.channels[0].value == Approx(17.25));
  // Always truncated: no value is ever made up from the fragment.
  rig.fake.truncate_data = 1000;
  r = run_poll(rig.io, *rig.port, *drv);
  for (auto& c : r.channels) CHECK_FALSE(c.value);
  rig.fake.truncate_data = 0;

  // A data reply that arrives after the timeout (a stale "0+99.5-9.5") is
  // never taken for an answer: not for the retry within that poll, not for
  // the next poll's requests.
  rig.fake.late_data_ms = 400;  // timeout 150 ms
  r = run_poll(rig.io, *rig.port, *drv);
  for (auto& c : r.channels)
    if (c.value) CHECK(*c.value != Approx(99.5));
  std::this_thread::sleep_for(std::chrono::milliseconds(500));  // the stale line is in by now
  r = run_poll(rig.io, *rig.port, *drv);
  REQUIRE(r.channels[0].value);
  CHECK(*r.channels[0].value == Approx(17.25));
  CHECK(*r.channels[1].value == Approx(-0.5));

  // Babbling line: 20 kB without a line end per command; the reply buffer
  // stays bounded (the driver caps a reply at 256 bytes; the port stops after
  // the read that passes the cap, reads being 256 bytes at most) and no value
  // comes out.
  rig.fake.babble = true;
  drivers::ExchangeLog log;
  r = run_poll(rig.io, *rig.port, *drv, &log);
  for (auto& c : r.channels) CHECK_FALSE(c.value);
  REQUIRE_FALSE(log.entries.empty());
  for (auto& e : log.entries) CHECK(e.second.size() <= 256 + 256);
  rig.fake.babble = false;
  std::this_thread::sleep_for(std::chrono::milliseconds(200));
  r = run_poll(rig.io, *rig.port, *drv);
  CHECK(r.channels[0].problem == ReadProblem::none);

  // Unplug and replug (the pty closed and recreated behind the same link).
  rig.fake.pty->unplug();
  r = run_poll(rig.io, *rig.port, *drv);
  for (auto& c : r.channels) CHECK(c.problem == ReadProblem::offline);
  rig.port->close();
  rig.fake.pty->replug();
  REQUIRE(rig.port->open() == "");
  r = run_poll(rig.io, *rig.port, *drv);
  CHECK(r.channels[0].problem == ReadProblem::none);
  CHECK(*r.channels[0].value == Approx(17.25));
}

TEST_CASE("sdi12: options and line checked", "[sdi12][config]") {
  auto line = test_line("/dev/null", 9600);
  auto p = validate_instrument(R"J({"driver": "sdi12", "options": {"address": "#", "measure": "R"},
    "channels": [{"source": {"value": 40}}]})J",
                               line);
  std::string all = p.render("f");
  INFO(all);
  CHECK(all.find("/instruments/0/options/address") != std::string::npos);
  CHECK(all.find("/instruments/0/options/measure") != std::string::npos);
  CHECK(all.find("/instruments/0/channels/0/source/value") != std::string::npos);
  CHECK(all.find("/lines/0: is 9600 baud") != std::string::npos);
}
