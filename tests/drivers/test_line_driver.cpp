// The line driver against fake instruments on ptys: polled and streaming,
// NMEA checksums, faults (timeout, garbage, bad checksum, non-numeric field,
// babbling line, late reply, unplug and replug).
#include <catch2/catch.hpp>

#include <cstdio>

#include "drivers/protocol/crc.h"
#include "fake_instrument.h"

using namespace tarn;
using namespace tarn::test;
using drivers::ReadProblem;

namespace {

// NMEA 0183 checksum: XOR of the characters between '$' and '*', two hex
// digits (NMEA 0183 standard, sentence structure; from memory). The sentence
// below is the widely quoted GPGGA example whose checksum is *47, a fixed
// external check on the helper the fake uses.
std::string nmea(const std::string& body) {
  char cs[4];
  std::snprintf(cs, sizeof cs, "%02X", protocol::nmea_checksum(body));
  return "$" + body + "*" + cs + "\r\n";
}

const char* fluoro_json = R"J({"name": "fluoro", "driver": "line",
  "options": {"poll": "MEAS\r\n", "checksum": "nmea", "prefix": "$HOLF"},
  "channels": [
    {"name": "chla", "source": {"field": 1},
     "calibration": {"kind": "counts", "dark_counts": 50, "scale_factor": 0.0121}},
    {"name": "pc", "source": {"field": 2}},
    {"name": "pe", "source": {"field": 3}}]})J";

// Answers each "MEAS" line with reply(n), n = 1, 2, ...
FakeInstrument::Responder answer_lines(std::function<std::string(int)> reply, int* count) {
  return [reply, count](Bytes& in) {
    Bytes out;
    for (;;) {
      auto nl = std::find(in.begin(), in.end(), '\n');
      if (nl == in.end()) break;
      in.erase(in.begin(), nl + 1);
      std::string r = reply(++*count);
      out.insert(out.end(), r.begin(), r.end());
    }
    return out;
  };
}

}  // namespace

TEST_CASE("line driver: NMEA sentence, counts calibration, checksum known value", "[line]") {
  // Widely quoted NMEA 0183 GGA example; its checksum is 0x47 (from memory).
  CHECK(protocol::nmea_checksum("GPGGA,123519,4807.038,N,01131.000,E,1,08,0.9,545.4,M,46.9,M,,") ==
        0x47);
  TempDir dir;
  int n = 0;
  FakeInstrument fake(dir.path + "/fluoro",
                      answer_lines([](int) { return nmea("HOLF,1250,3.5,0.8,17.2"); }, &n));
  boost::asio::io_context io;
  auto line = test_line(fake.link());
  auto in = test_instrument(fluoro_json, line);
  auto drv = make_driver(in, line);
  drivers::SerialPort port(io, line);
  REQUIRE(port.open() == "");
  drivers::ExchangeLog log;
  auto r = run_poll(io, port, *drv, &log);
  REQUIRE(r.channels.size() == 3);
  CHECK(r.error == "");
  CHECK(r.channels[0].problem == ReadProblem::none);
  CHECK(*r.channels[0].value == Approx((1250 - 50) * 0.0121));  // 14.52 ug/L
  CHECK(*r.channels[1].value == Approx(3.5));
  CHECK(*r.channels[2].value == Approx(0.8));
  REQUIRE(log.entries.size() == 2);
  CHECK(text_of(log.entries[0].second) == "MEAS\r\n");
}

TEST_CASE("line driver: bad checksum, non-numeric field, status, garbage", "[line]") {
  TempDir dir;
  int n = 0;
  std::string reply;
  std::mutex mu;
  FakeInstrument fake(dir.path + "/fluoro", answer_lines(
                                                [&](int) {
                                                  std::lock_guard<std::mutex> g(mu);
                                                  return reply;
                                                },
                                                &n));
  boost::asio::io_context io;
  auto line = test_line(fake.link());
  auto drv = make_driver(test_instrument(fluoro_json, line), line);
  drivers::SerialPort port(io, line);
  REQUIRE(port.open() == "");
  auto set = [&](std::string s) {
    std::lock_guard<std::mutex> g(mu);
    reply = std::move(s);
  };

  // One flipped character: the checksum no longer matches -> every channel garbled.
  std::string good = nmea("HOLF,1250,3.5,0.8");
  std::string bad = good;
  bad[7] = '3';
  set(bad);
  auto r = run_poll(io, port, *drv);
  for (auto& c : r.channels) CHECK(c.problem == ReadProblem::garbled);
  CHECK(r.error.find("checksum") != std::string::npos);

  // A non-numeric field: only that channel is garbled.
  set(nmea("HOLF,1250,x.5,0.8"));
  r = run_poll(io, port, *drv);
  CHECK(r.channels[0].problem == ReadProblem::none);
  CHECK(r.channels[1].problem == ReadProblem::garbled);
  CHECK_FALSE(r.channels[1].value);
  CHECK(r.channels[2].problem == ReadProblem::none);

  // Random bytes then CR LF: no line with the prefix -> no usable line in time.
  set(std::string("\x01\xfe\x80garbage\x7f", 11) + "\r\n");
  r = run_poll(io, port, *drv);
  for (auto& c : r.channels) CHECK(c.problem == ReadProblem::no_reply);

  // Status field: 0 is ok, anything else is an instrument error.
  auto line2 = line;
  auto drv2 = make_driver(test_instrument(R"J({"driver": "line",
      "options": {"poll": "MEAS\r\n", "delimiter": ";", "status": {"field": 2, "ok": [0]}},
      "channels": [{"source": {"field": 0}}, {"source": {"field": 1}}]})J",
                                          line2),
                          line2);
  set("1.5;2.5;0\r\n");
  r = run_poll(io, port, *drv2);
  CHECK(*r.channels[1].value == 2.5);
  set("1.5;2.5;4\r\n");
  r = run_poll(io, port, *drv2);
  for (auto& c : r.channels) CHECK(c.problem == ReadProblem::instrument_error);
  CHECK(r.error == "instrument status 4");
}

TEST_CASE("line driver: regex capture groups", "[line]") {
  TempDir dir;
  int n = 0;
  FakeInstrument fake(
      dir.path + "/t",
      answer_lines([](int) { return std::string("T=17.25 C  P=1013.2 hPa\r\n"); }, &n));
  boost::asio::io_context io;
  auto line = test_line(fake.link());
  auto drv = make_driver(test_instrument(R"J({"driver": "line",
      "options": {"poll": "R\r\n", "pattern": "T=([-0-9.]+) C +P=([0-9.]+)"},
      "channels": [{"source": {"field": 1}}, {"source": {"field": 2},
        "calibration": {"kind": "linear", "gain": 0.1, "offset": 0}}]})J",
                                         line),
                         line);
  drivers::SerialPort port(io, line);
  REQUIRE(port.open() == "");
  auto r = run_poll(io, port, *drv);
  CHECK(*r.channels[0].value == Approx(17.25));
  CHECK(*r.channels[1].value == Approx(101.32));
}

TEST_CASE("line driver: timeout, and a late reply is not taken for the next answer", "[line]") {
  TempDir dir;
  int n = 0;
  std::atomic<bool> mute{false};
  FakeInstrument* self = nullptr;
  // Reply k carries k; the first reply comes 400 ms late (timeout 200 ms).
  FakeInstrument fake(dir.path + "/slow", [&](Bytes& in) {
    Bytes out;
    auto nl = std::find(in.begin(), in.end(), '\n');
    if (nl == in.end()) return out;
    in.erase(in.begin(), nl + 1);
    ++n;
    if (mute) return out;
    std::string r = "V," + std::to_string(n) + "\r\n";
    if (n == 1) {
      std::thread([self, r] {
        std::this_thread::sleep_for(std::chrono::milliseconds(400));
        self->send(bytes_of(r));
      }).detach();
      return out;
    }
    return bytes_of(r);
  });
  self = &fake;
  boost::asio::io_context io;
  auto line = test_line(fake.link(), 9600, 200, 0);
  auto drv = make_driver(test_instrument(R"J({"driver": "line", "options": {"poll": "Q\r\n"},
      "channels": [{"source": {"field": 1}}]})J",
                                         line),
                         line);
  drivers::SerialPort port(io, line);
  REQUIRE(port.open() == "");
  auto t0 = std::chrono::steady_clock::now();
  auto r = run_poll(io, port, *drv);
  auto took = std::chrono::steady_clock::now() - t0;
  CHECK(r.channels[0].problem == ReadProblem::no_reply);
  CHECK(took >= std::chrono::milliseconds(190));
  CHECK(took < std::chrono::milliseconds(390));                 // never waits for the late reply
  std::this_thread::sleep_for(std::chrono::milliseconds(400));  // "V,1" arrives now, unasked
  r = run_poll(io, port, *drv);
  REQUIRE(r.channels[0].value);
  CHECK(*r.channels[0].value == 2);  // the answer to request 2, not the late "V,1"

  // Dead instrument: costs the timeout times (1 + retries), then no_reply.
  mute = true;
  auto line_r = test_line(fake.link(), 9600, 100, 2);
  auto drv_r = make_driver(test_instrument(R"J({"driver": "line", "options": {"poll": "Q\r\n"},
      "channels": [{"source": {"field": 1}}]})J",
                                           line_r),
                           line_r);
  drivers::SerialPort port_r(io, line_r);
  port.close();
  REQUIRE(port_r.open() == "");
  const int before = n;
  t0 = std::chrono::steady_clock::now();
  r = run_poll(io, port_r, *drv_r);
  took = std::chrono::steady_clock::now() - t0;
  CHECK(r.channels[0].problem == ReadProblem::no_reply);
  CHECK(took >= std::chrono::milliseconds(290));
  CHECK(took < std::chrono::milliseconds(600));
  std::this_thread::sleep_for(std::chrono::milliseconds(50));
  CHECK(n - before == 3);  // first try + 2 retries
}

TEST_CASE("line driver: babbling line keeps memory bounded", "[line]") {
  TempDir dir;
  // Answers every poll with 20 kB without a line end, then keeps babbling.
  FakeInstrument fake(dir.path + "/babble", [](Bytes& in) {
    in.clear();
    return Bytes(20000, 'A');
  });
  boost::asio::io_context io;
  auto line = test_line(fake.link(), 9600, 300, 0);
  auto drv = make_driver(test_instrument(R"J({"driver": "line",
      "options": {"poll": "Q\r\n", "max_line": 64},
      "channels": [{"source": {"field": 0}}]})J",
                                         line),
                         line);
  drivers::SerialPort port(io, line);
  REQUIRE(port.open() == "");
  drivers::ExchangeLog log;
  auto r = run_poll(io, port, *drv, &log);
  CHECK(r.channels[0].problem == ReadProblem::garbled);
  // The port stops gathering at 4 x max_line: the reply buffer never held the 20 kB.
  REQUIRE(log.entries.size() == 2);
  CHECK(log.entries[1].second.size() <= 4 * 64 + 256);
  CHECK(r.error.find("longer than") != std::string::npos);
}

TEST_CASE("line driver: streaming instrument, newest complete line", "[line]") {
  TempDir dir;
  std::atomic<int> k{0};
  FakeInstrument fake(dir.path + "/stream", [](Bytes& in) {
    in.clear();
    return Bytes();
  });
  fake.set_idle([&] { fake.send(bytes_of(nmea("HOLS," + std::to_string(++k)))); },
                std::chrono::milliseconds(20));
  boost::asio::io_context io;
  auto line = test_line(fake.link(), 9600, 500, 0);
  auto drv = make_driver(test_instrument(R"J({"driver": "line",
      "options": {"checksum": "nmea_if_present", "prefix": "$HOLS"},
      "channels": [{"source": {"field": 1}}]})J",
                                         line),
                         line);
  drivers::SerialPort port(io, line);
  REQUIRE(port.open() == "");
  std::this_thread::sleep_for(std::chrono::milliseconds(300));  // ~15 lines pending
  const int sent_before = k;
  auto r = run_poll(io, port, *drv);
  REQUIRE(r.channels[0].value);
  CHECK(*r.channels[0].value >= sent_before - 1);  // the newest, not the oldest pending line
  CHECK(sent_before > 5);
}

TEST_CASE("line driver: unplug gives offline, replug reads again", "[line]") {
  TempDir dir;
  int n = 0;
  FakeInstrument fake(dir.path + "/fluoro",
                      answer_lines([](int) { return nmea("HOLF,1250,3.5,0.8"); }, &n));
  boost::asio::io_context io;
  auto line = test_line(fake.link());
  auto drv = make_driver(test_instrument(fluoro_json, line), line);
  drivers::SerialPort port(io, line);
  REQUIRE(port.open() == "");
  CHECK(run_poll(io, port, *drv).channels[0].problem == ReadProblem::none);
  fake.unplug();
  auto r = run_poll(io, port, *drv);
  for (auto& c : r.channels) CHECK(c.problem == ReadProblem::offline);
  port.close();
  CHECK(port.open() != "");  // the link is gone
  fake.replug();
  REQUIRE(port.open() == "");
  CHECK(run_poll(io, port, *drv).channels[0].problem == ReadProblem::none);
}

TEST_CASE("line driver: option validation names the pointer", "[line][config]") {
  auto line = test_line("/dev/null");
  auto p = validate_instrument(R"J({"driver": "line", "options": {"pol": "Q", "checksum": "xor"},
      "channels": [{"source": {"fld": 1}}]})J",
                               line);
  std::string all = p.render("f");
  CHECK(all.find("/instruments/0/options/pol") != std::string::npos);
  CHECK(all.find("/instruments/0/options/checksum") != std::string::npos);
  CHECK(all.find("/instruments/0/channels/0/source/field") != std::string::npos);
  p = validate_instrument(R"J({"driver": "line", "options": {"pattern": "a(b"},
      "channels": [{"source": {"field": 1}}]})J",
                          line);
  CHECK(p.render("f").find("not a valid regular expression") != std::string::npos);
  p = validate_instrument(R"J({"driver": "line", "options": {},
      "channels": [{"source": {"field": 1}, "calibration": {"kind": "polynomial", "coefficients": []}}]})J",
                          line);
  CHECK(p.render("f").find("/instruments/0/channels/0/calibration/coefficients") !=
        std::string::npos);
}
