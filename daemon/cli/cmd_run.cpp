// tarn run --config FILE [--speed N] [--log-level L] [--allow-root]: the daemon.
#include <unistd.h>

#include <boost/asio/io_context.hpp>
#include <boost/asio/signal_set.hpp>
#include <boost/asio/steady_timer.hpp>
#include <cstdio>
#include <cstdlib>
#include <filesystem>

#include "daemon/cli/command.h"
#include "daemon/control/control_server.h"
#include "daemon/core/config_check.h"
#include "daemon/core/notify.h"
#include "daemon/core/station.h"
#include "drivers/os/asio_env.h"
#include "drivers/os/logging.h"

namespace {

namespace asio = boost::asio;

constexpr const char* kUsage =
    "usage: tarn run --config FILE [--speed N] [--log-level LEVEL] [--allow-root]\n"
    "Runs the station daemon. SIGTERM/SIGINT stop it in order, SIGHUP re-reads the config.\n"
    "  --speed N      run timers and timestamps N times faster (demo, tests); 1..10000\n"
    "  --speed-origin T  with --speed: station time = T + (now - T) * N, T in unix seconds,\n"
    "                 so that restarts continue one timeline (power-cut tests)\n"
    "  --log-level L  trace, debug, info, warn, error (overrides log.level of the config)\n";

void heartbeat(asio::steady_timer& t, std::chrono::microseconds every,
               tarn::daemon::Station& station) {
  t.expires_after(every);
  t.async_wait([&t, every, &station](boost::system::error_code ec) {
    if (ec) return;
    tarn::daemon::notify_watchdog();
    tarn::daemon::notify_status(station.status_line());
    heartbeat(t, every, station);
  });
}

int run_daemon(const tarn::cli::Args& args) {
  tarn::cli::Options o(args, {"config", "speed", "speed-origin", "log-level"},
                       {"allow-root", "help"});
  if (!o.ok() || o.has("help") || !o.has("config")) {
    std::fprintf(o.has("help") ? stdout : stderr, "%s%s%s", o.error().c_str(),
                 o.error().empty() ? "" : "\n", kUsage);
    return o.has("help") ? 0 : tarn::cli::ex_usage;
  }
  if (::geteuid() == 0 && !o.has("allow-root")) {
    std::fprintf(
        stderr,
        "tarn run: refusing to run as root; run as the tarn user (see systemd/tarn.service) "
        "or pass --allow-root\n");
    return tarn::cli::ex_noperm;
  }
  double speed = 1;
  if (o.has("speed")) {
    char* end = nullptr;
    const std::string text = o.get("speed");
    speed = std::strtod(text.c_str(), &end);
    if (!end || *end || !(speed >= 1 && speed <= 10000)) {
      std::fprintf(stderr,
                   "tarn run: --speed %s is not allowed; allowed: a number from 1 to 10000\n",
                   o.get("speed").c_str());
      return tarn::cli::ex_usage;
    }
  }
  std::string file = o.get("config");
  auto res = tarn::daemon::load_and_check(file);
  if (!res.config) {
    std::fputs(res.problems.render(file).c_str(), stderr);
    return tarn::cli::ex_config;
  }
  std::string level = o.get("log-level", res.config->log_level);
  tarn::os::setup_logging(level);
  auto log = tarn::os::logger("daemon");

  std::error_code ec;
  std::filesystem::create_directories(res.config->paths.runtime_dir, ec);
  std::filesystem::create_directories(res.config->paths.state_dir, ec);

  asio::io_context io(1);
  std::optional<std::int64_t> origin;
  if (o.has("speed-origin")) {
    char* end = nullptr;
    const std::string text = o.get("speed-origin");
    double t = std::strtod(text.c_str(), &end);
    if (!end || *end || !(t > 0)) {
      std::fprintf(stderr, "tarn run: --speed-origin %s is not allowed; allowed: unix seconds\n",
                   o.get("speed-origin").c_str());
      return tarn::cli::ex_usage;
    }
    origin = static_cast<std::int64_t>(t * 1000);
  }
  tarn::os::AsioEnv clock(io, speed, origin);
  tarn::daemon::Station station(io, clock, *res.config);
  tarn::control::ControlServer control(io, res.config->paths.runtime_dir + "/control.sock");
  control.handle("status", [&](const tarn::control::Json&) { return station.status(); });
  control.handle("maintenance", [&](const tarn::control::Json& req) {
    using tarn::control::Json;
    std::string action = req.value("action", "");
    if (action != "start" && action != "stop")
      return Json{{"ok", false}, {"error", "action must be start or stop"}};
    tarn::config::MaintenanceArgs a;
    a.start = action == "start";
    if (req.contains("instrument") && req["instrument"].is_string())
      a.instrument = req["instrument"].get<std::string>();
    if (req.contains("note") && req["note"].is_string()) a.note = req["note"].get<std::string>();
    if (a.note.size() > 200)
      return Json{{"ok", false}, {"error", "note is longer than 200 bytes; allowed: at most 200"}};
    if (req.contains("max_minutes") && !req["max_minutes"].is_null()) {
      const auto& m = req["max_minutes"];
      if (!a.start || !m.is_number_integer() ||
          m.get<std::int64_t>() < tarn::config::kMaintenanceMaxMinutesMin ||
          m.get<std::int64_t>() > tarn::config::kMaintenanceMaxMinutesMax)
        return Json{{"ok", false},
                    {"error", "max_minutes is not allowed; allowed: with start only, an integer " +
                                  std::to_string(tarn::config::kMaintenanceMaxMinutesMin) + " to " +
                                  std::to_string(tarn::config::kMaintenanceMaxMinutesMax)}};
      a.max_minutes = m.get<std::int64_t>();
    }
    Json data = Json::object();
    std::string err = station.maintenance(a, "control socket", data);
    if (!err.empty()) return Json{{"ok", false}, {"error", err}};
    data["ok"] = true;
    return data;
  });
  if (speed != 1) {
    // Simulated time only: lets the tests step the station clock.
    control.handle("test-clock-step", [&](const tarn::control::Json& req) {
      std::int64_t s = req.value("seconds", std::int64_t(0));
      clock.step(s * 1000);
      log->warn("test: station clock stepped by {} s", s);
      return tarn::control::Json{{"ok", true}};
    });
  }
  control.handle("ping", [](const tarn::control::Json&) {
    return tarn::control::Json{{"ok", true}, {"pong", true}};
  });
  if (auto err = control.start(); !err.empty()) {
    log->error("{}", err);
    return tarn::cli::ex_cantcreat;
  }

  asio::signal_set stop_signals(io, SIGTERM, SIGINT);
  asio::signal_set hup(io, SIGHUP);
  int exit_code = 0;
  bool stopping = false;
  std::function<void()> wait_hup = [&] {
    hup.async_wait([&](boost::system::error_code e, int) {
      if (e) return;
      log->info("SIGHUP: re-reading {}", file);
      auto next = tarn::daemon::load_and_check(file);
      if (!next.config) {
        for (auto& p : next.problems.list())
          log->error("{}: {}: {}", file, p.where.empty() ? "/" : p.where, p.message);
        log->error("new config refused ({} problems); still running on the previous one",
                   next.problems.size());
      } else {
        // --log-level on the command line wins over log.level, also after a reload.
        if (o.has("log-level")) next.config->log_level = o.get("log-level");
        station.reload(*next.config);
      }
      wait_hup();
    });
  };
  wait_hup();
  stop_signals.async_wait([&](boost::system::error_code e, int sig) {
    if (e || stopping) return;
    stopping = true;
    log->info("{}: stopping", sig == SIGTERM ? "SIGTERM" : "SIGINT");
    tarn::daemon::notify_stopping();
    hup.cancel();
    control.stop();
    // The stop must end within 2 s (SIGTERM): 1 s for the outbox to drain,
    // then the link's orderly disconnect (at most 0.7 s, mqtt_backend.cpp).
    station.stop(1000, [&] { io.stop(); });
  });

  asio::steady_timer watchdog(io);
  auto wd = tarn::daemon::watchdog_interval();
  try {
    station.start();
  } catch (const std::exception& e) {
    log->critical("cannot start: {}", e.what());
    return tarn::cli::ex_cantcreat;
  }
  tarn::daemon::notify_ready(station.status_line());
  heartbeat(watchdog, wd.count() ? wd / 2 : std::chrono::seconds(10), station);

  io.run();
  log->info("stopped");
  spdlog::shutdown();
  return exit_code;
}

}  // namespace

TARN_COMMAND(run, "run the station daemon", run_daemon);
