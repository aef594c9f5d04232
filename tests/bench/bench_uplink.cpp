// bench_uplink: drains a 30-day backlog (4,320 window packets of the demo
// station's size) through the mqtt backend to a mosquitto it starts on a free
// port of 127.0.0.1, QoS 1, counting only PUBACKed packets. Prints the median
// of 3 runs against the 30 s target, and the bytes per day of the demo station
// under each link policy, from the backend's measured per-packet bytes plus the
// fixed MQTT 3.1.1 packet sizes (OASIS MQTT 3.1.1, sections 3.1-3.14).
#include <netinet/in.h>
#include <signal.h>
#include <sys/socket.h>
#include <sys/wait.h>
#include <unistd.h>

#include <algorithm>
#include <boost/asio/io_context.hpp>
#include <boost/asio/steady_timer.hpp>
#include <chrono>
#include <cstdio>
#include <fstream>
#include <functional>
#include <string>
#include <vector>

#include "config/station_config.h"
#include "daemon/uplink/backend.h"
#include "drivers/os/asio_env.h"
#include "drivers/os/logging.h"

namespace {

int free_port() {
  int s = ::socket(AF_INET, SOCK_STREAM, 0);
  sockaddr_in a{};
  a.sin_family = AF_INET;
  a.sin_addr.s_addr = htonl(INADDR_LOOPBACK);
  ::bind(s, reinterpret_cast<sockaddr*>(&a), sizeof a);
  socklen_t n = sizeof a;
  ::getsockname(s, reinterpret_cast<sockaddr*>(&a), &n);
  int port = ntohs(a.sin_port);
  ::close(s);
  return port;
}

struct Run {
  double seconds = 0;
  std::uint64_t acked = 0, bytes = 0;
};

Run drain(int port, std::size_t packets, std::size_t payload_bytes) {
  std::string json = R"({"station": {"id": "hollin-buoy-1", "latitude": 55.10, "longitude": 3.60},
    "lines": [], "instruments": [], "uplink": {"backend": "mqtt", "options":
    {"host": "127.0.0.1", "port": )" +
                     std::to_string(port) + R"(, "max_inflight": 32}}})";
  auto res = tarn::config::load_text(json, "bench");
  boost::asio::io_context io;
  tarn::os::AsioEnv clock(io);
  tarn::uplink::BackendContext ctx{io, clock, *res.config, "bench"};
  auto link = tarn::uplink::find_backend("mqtt")->create(ctx);
  link->start();
  Run r;
  std::size_t next = 1;
  std::chrono::steady_clock::time_point t0{};
  bool started = false;
  boost::asio::steady_timer tick(io);
  std::function<void()> pump = [&] {
    if (link->state() == tarn::uplink::LinkState::up) {
      if (!started) {
        started = true;
        t0 = std::chrono::steady_clock::now();
      }
      while (next <= packets && link->free_slots() > 0) {
        tarn::uplink::OutgoingPacket p;
        p.sequence = next++;
        p.payload.assign(payload_bytes, 0x5a);
        link->send(std::move(p), [&](std::uint64_t seq, bool ok, const std::string&) {
          if (ok)
            r.acked++;
          else
            next = std::min<std::size_t>(next, seq);  // resend from there
          if (r.acked == packets) {
            r.seconds =
                std::chrono::duration<double>(std::chrono::steady_clock::now() - t0).count();
            io.stop();
          }
        });
      }
    }
    tick.expires_after(std::chrono::milliseconds(1));
    tick.async_wait([&](boost::system::error_code ec) {
      if (!ec) pump();
    });
  };
  pump();
  boost::asio::steady_timer limit(io, std::chrono::seconds(120));
  limit.async_wait([&](boost::system::error_code ec) {
    if (!ec) io.stop();
  });
  io.run();
  r.bytes = link->bytes_sent();
  link->stop();
  return r;
}

}  // namespace

int main() {
  tarn::os::setup_logging("warn");
  int port = free_port();
  std::string conf = "/tmp/bench-uplink-" + std::to_string(::getpid()) + ".conf";
  std::ofstream(conf) << "listener " << port
                      << " 127.0.0.1\nallow_anonymous true\npersistence false\n";
  pid_t broker = ::fork();
  if (broker == 0) {
    std::FILE* null = std::fopen("/dev/null", "w");
    if (null) {
      ::dup2(::fileno(null), 1);
      ::dup2(::fileno(null), 2);
    }
    ::execlp("mosquitto", "mosquitto", "-c", conf.c_str(), static_cast<char*>(nullptr));
    ::_exit(127);
  }
  ::sleep(1);
  const std::size_t packets = 4320;  // 30 days of 600 s windows
  const std::size_t payload = 140;   // a demo window packet (9 channels x 10 samples): 134 to 153
                                     // bytes, mean 140 (demo/run.sh)
  std::vector<Run> runs;
  for (int i = 0; i < 3; ++i) runs.push_back(drain(port, packets, payload));
  ::kill(broker, SIGTERM);
  ::waitpid(broker, nullptr, 0);
  ::unlink(conf.c_str());
  std::sort(runs.begin(), runs.end(), [](auto& a, auto& b) { return a.seconds < b.seconds; });
  const Run& med = runs[1];
  bool all = std::all_of(runs.begin(), runs.end(), [&](auto& r) { return r.acked == packets; });
  std::printf("drain of a 30-day backlog: %zu packets of %zu bytes, QoS 1, loopback mosquitto\n",
              packets, payload);
  std::printf("  runs: %.2f s, %.2f s, %.2f s; median %.2f s (%.0f packets/s); target < 30 s: %s\n",
              runs[0].seconds, runs[1].seconds, runs[2].seconds, med.seconds, packets / med.seconds,
              all && med.seconds < 30 ? "PASS" : "FAIL");
  double per_packet = double(med.bytes) / double(packets);
  std::printf(
      "  bytes on the MQTT layer per packet (PUBLISH + PUBACK, measured by the backend): %.1f\n",
      per_packet);
  // Per day for the demo station: 144 window packets + 24 health packets (about 20 B).
  double data = 144 * per_packet + 24 * (per_packet - double(payload) + 20);
  // MQTT 3.1.1 fixed sizes: PINGREQ + PINGRESP 2 + 2 bytes; a session costs CONNECT
  // (about 60 B with client id, will topic and message), CONNACK 4, SUBSCRIBE about 30,
  // SUBACK 5, retained status PUBLISH about 60, DISCONNECT 2 (estimates, TCP/IP not counted).
  double session = 60 + 4 + 30 + 5 + 60 + 2;
  double always = data + 86400.0 / 60 * 4 + session;  // keepalive 60 s
  double hourly = data + 24 * session;
  double four = data + 6 * session;
  std::printf("bytes per day, demo station, MQTT layer (TCP/IP and TLS not counted):\n");
  std::printf(
      "  always (keepalive 60 s)      %8.0f\n  scheduled every 60 min       %8.0f\n"
      "  scheduled every 4 h          %8.0f\n",
      always, hourly, four);
  return all ? 0 : 1;
}
