// tarn relay --config FILE [--check] [--log-level L]: the shore end of a
// serial-radio link (daemon/uplink/relay.h). The config is its own small JSON file:
//   {
//     "modem":    { "port": "/dev/ttyUSB0", "baud": 9600, "mtu": 255 },
//     "stations": ["hollin-buoy-1"],
//     "broker":   { "host": "127.0.0.1", "port": 1883, "topic_prefix": "tarn" },
//     "state_dir": "/var/lib/tarn-relay"
//   }
// "broker" takes exactly the options of a station's mqtt uplink.options.
#include <boost/asio/io_context.hpp>
#include <boost/asio/signal_set.hpp>
#include <cstdio>

#include "daemon/cli/command.h"
#include "daemon/uplink/relay.h"
#include "drivers/os/asio_env.h"
#include "drivers/os/logging.h"

namespace {

namespace asio = boost::asio;

constexpr const char* kUsage =
    "usage: tarn relay --config FILE [--check] [--log-level LEVEL]\n"
    "Shore end of a serial-radio link: reads frames from the modem, publishes the\n"
    "stations' packets to the MQTT broker, acknowledges each after the broker's PUBACK.\n"
    "  --check        validate the config and exit (0, or 78 with one line per problem)\n"
    "  --log-level L  trace, debug, info, warn, error (overrides log.level of the config)\n";

int run_relay(const tarn::cli::Args& args) {
  tarn::cli::Options o(args, {"config", "log-level"}, {"check", "help"});
  if (!o.ok() || o.has("help") || !o.has("config")) {
    std::fprintf(o.has("help") ? stdout : stderr, "%s%s%s", o.error().c_str(),
                 o.error().empty() ? "" : "\n", kUsage);
    return o.has("help") ? 0 : tarn::cli::ex_usage;
  }
  std::string file = o.get("config");
  tarn::config::Problems problems;
  auto cfg = tarn::uplink::load_relay_config(file, problems);
  if (!cfg) {
    std::fputs(problems.render(file).c_str(), stderr);
    return tarn::cli::ex_config;
  }
  if (o.has("check")) {
    std::printf("%s: ok (%zu station(s), modem %s)\n", file.c_str(), cfg->stations.size(),
                cfg->modem.port.c_str());
    return 0;
  }
  tarn::os::setup_logging(o.get("log-level", cfg->log_level));
  auto log = tarn::os::logger("relay");

  asio::io_context io(1);
  tarn::os::AsioEnv clock(io);
  tarn::uplink::Relay relay(io, clock, *cfg);
  if (auto err = relay.start(); !err.empty()) {
    log->critical("cannot start: {}", err);
    return tarn::cli::ex_cantcreat;
  }
  asio::signal_set stop_signals(io, SIGTERM, SIGINT);
  stop_signals.async_wait([&](boost::system::error_code e, int sig) {
    if (e) return;
    log->info("{}: stopping", sig == SIGTERM ? "SIGTERM" : "SIGINT");
    relay.stop();
    io.stop();
  });
  io.run();
  spdlog::shutdown();
  return 0;
}

}  // namespace

TARN_COMMAND(relay, "shore end of a serial-radio link: radio frames to an MQTT broker", run_relay);
