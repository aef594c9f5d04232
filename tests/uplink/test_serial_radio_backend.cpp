// The serial-radio backend's timers on simulated time: a pty stands in for
// the radio modem (its master is the relay's side), the SimEnv for the clock.
// Pings until the relay answers, retransmission after the ack timeout, give
// up after the retries, and the link dropped when the relay falls silent.
// Frame layout: codec/RADIO.md (encode_frame/decode_frame of codec/radio_frame.h).
#include <fcntl.h>
#include <unistd.h>

#include <catch2/catch.hpp>

#include <boost/asio/io_context.hpp>
#include <cstdlib>

#include "codec/radio_frame.h"
#include "daemon/uplink/backend.h"
#include "daemon/uplink/serial_radio_backend.h"
#include "sim_env.h"

using namespace tarn;
namespace radio = codec::radio;

namespace {

// The relay's side of the radio: the pty master.
struct FakeRelay {
  int master = -1;
  std::string slave;
  radio::FrameSplitter splitter{255};
  FakeRelay() {
    master = ::posix_openpt(O_RDWR | O_NOCTTY);
    REQUIRE(master >= 0);
    REQUIRE(::grantpt(master) == 0);
    REQUIRE(::unlockpt(master) == 0);
    slave = ::ptsname(master);
    ::fcntl(master, F_SETFL, ::fcntl(master, F_GETFL) | O_NONBLOCK);
  }
  ~FakeRelay() { ::close(master); }
  // Frames the station sent since the last call.
  std::vector<radio::Frame> received() {
    std::vector<radio::Frame> out;
    std::uint8_t buf[1024];
    ssize_t n;
    while ((n = ::read(master, buf, sizeof buf)) > 0)
      splitter.feed(std::span<const std::uint8_t>(buf, std::size_t(n)),
                    [&](std::span<const std::uint8_t> run) {
                      auto f = radio::decode_frame(run);
                      if (f.ok()) out.push_back(*f);
                    });
    return out;
  }
  void send(const radio::Frame& f) {
    auto wire = radio::encode_frame(f, 255);
    REQUIRE(wire.ok());
    REQUIRE(::write(master, wire->data(), wire->size()) == ssize_t(wire->size()));
  }
};

// Lets the io_context move the bytes between the backend and the pty (real
// I/O, a few milliseconds); simulated time stands still meanwhile.
void settle(boost::asio::io_context& io) {
  for (int i = 0; i < 10; ++i) {
    if (io.stopped()) io.restart();
    io.run_for(std::chrono::milliseconds(2));
  }
}

// Runs the io_context until `done()` holds; the bound (10 s of real time) is
// only there so that a broken backend fails the test instead of hanging it.
template <typename Pred>
bool settle_until(boost::asio::io_context& io, Pred done) {
  for (int i = 0; i < 5000 && !done(); ++i) {
    if (io.stopped()) io.restart();
    io.run_for(std::chrono::milliseconds(2));
  }
  return done();
}

std::size_t count(const std::vector<radio::Frame>& fs, radio::FrameType t) {
  std::size_t n = 0;
  for (auto& f : fs) n += f.type == t;
  return n;
}

// Frames the station sends until `n` of type `t` arrived.
std::vector<radio::Frame> wait_for(boost::asio::io_context& io, FakeRelay& relay,
                                   radio::FrameType t, std::size_t n) {
  std::vector<radio::Frame> got;
  settle_until(io, [&] {
    for (auto& f : relay.received()) got.push_back(f);
    return count(got, t) >= n;
  });
  return got;
}

}  // namespace

TEST_CASE("serial radio: pings, retransmits after the ack timeout, gives up, drops a silent link",
          "[serial_radio]") {
  FakeRelay relay;
  boost::asio::io_context io;
  test::SimEnv env;
  config::StationConfig cfg;
  cfg.station.id = "north-buoy";
  cfg.uplink.options = {{"port", relay.slave},
                        {"ack_timeout_ms", 2000},
                        {"retries", 1},
                        {"ping_interval_ms", 10000},
                        {"link_timeout_ms", 40000}};
  uplink::BackendContext ctx{io, env, cfg, ""};
  auto backend = uplink::find_backend("serial-radio")->create(ctx);
  backend->start();
  const std::uint16_t tag = radio::station_tag("north-buoy");

  // Not up yet: a ping at once, then one every ack timeout (2 s).
  auto got = wait_for(io, relay, radio::FrameType::ping, 1);
  REQUIRE(count(got, radio::FrameType::ping) == 1);
  CHECK(backend->state() == uplink::LinkState::connecting);
  env.advance(1950);
  settle(io);
  CHECK(count(relay.received(), radio::FrameType::ping) == 0);
  env.advance(100);
  got = wait_for(io, relay, radio::FrameType::ping, 1);
  REQUIRE(count(got, radio::FrameType::ping) == 1);

  // The relay answers ready: the link is up.
  relay.send({radio::FrameType::pong, tag, got.back().sequence, {1}});
  CHECK(settle_until(io, [&] { return backend->state() == uplink::LinkState::up; }));

  // A packet: sent once, again after 2 s without ack, then given up after
  // 1 retry (2 tries), its handler told why.
  std::vector<std::string> results;
  backend->send({7, uplink::PacketKind::window, {1, 2, 3}, false},
                [&](std::uint64_t seq, bool ok, const std::string& why) {
                  CHECK(seq == 7);
                  results.push_back(ok ? "ok" : why);
                });
  got = wait_for(io, relay, radio::FrameType::data, 1);
  REQUIRE(count(got, radio::FrameType::data) == 1);
  CHECK(got[0].sequence == 7);
  CHECK(got[0].payload == std::vector<std::uint8_t>{0, 1, 2, 3});  // route byte 0: window
  env.advance(1900);
  settle(io);
  CHECK(count(relay.received(), radio::FrameType::data) == 0);
  env.advance(200);
  got = wait_for(io, relay, radio::FrameType::data, 1);
  CHECK(count(got, radio::FrameType::data) == 1);  // the retransmission
  CHECK(got.back().sequence == 7);
  CHECK(results.empty());
  env.advance(2100);
  settle_until(io, [&] { return !results.empty(); });
  REQUIRE(results.size() == 1);
  CHECK(results[0] == "no radio acknowledgement after 2 tries");
  CHECK(backend->state() == uplink::LinkState::up);  // 40 s of link timeout not yet over

  // An acked packet completes without retransmission.
  backend->send(
      {8, uplink::PacketKind::alert, {9}, false},
      [&](std::uint64_t, bool ok, const std::string&) { results.push_back(ok ? "ok" : "no"); });
  got = wait_for(io, relay, radio::FrameType::data, 1);
  REQUIRE(count(got, radio::FrameType::data) == 1);
  relay.send({radio::FrameType::ack, tag, 8, {}});
  settle_until(io, [&] { return results.size() == 2; });
  REQUIRE(results.size() == 2);
  CHECK(results[1] == "ok");

  // The relay falls silent: while up, pings go out every 10 s of idle line;
  // 40 s after it was last heard the link is no longer up.
  env.advance(30000);
  CHECK(backend->state() == uplink::LinkState::up);
  CHECK(count(wait_for(io, relay, radio::FrameType::ping, 2), radio::FrameType::ping) >= 2);
  env.advance(10100);
  CHECK(backend->state() == uplink::LinkState::connecting);
  CHECK(backend->last_error() == "no answer from the relay for 40000 ms");
  backend->stop();
  settle(io);
}
