// tarn probe --config FILE --instrument NAME [--verbose]: polls one instrument
// once, as the daemon would, and prints the raw exchange (hex for binary
// protocols), the calibrated value of every channel with its unit, and for
// SDI-12 the identify reply. Needs no daemon; refuses with one line (exit 75)
// if the port is held by another process, e.g. a running daemon.
// Exit: 0 every channel read, 69 a channel without value or the port cannot
// be opened, 75 port busy, 78 config error, 64 usage.
// The warm-up time is not applied: a probe shows what the instrument says now.
#include <spdlog/spdlog.h>

#include <boost/asio/co_spawn.hpp>
#include <boost/asio/detached.hpp>
#include <boost/asio/io_context.hpp>
#include <cstdio>

#include "daemon/cli/command.h"
#include "daemon/core/config_check.h"
#include "drivers/calibration_config.h"
#include "drivers/driver.h"
#include "drivers/driver_support.h"

namespace {

namespace drv = tarn::drivers;

void print_exchange(const drv::ExchangeLog& log, bool binary) {
  for (auto& [dir, bytes] : log.entries) {
    if (dir == "tx" && bytes.empty()) continue;
    std::string shown = bytes.empty() ? std::string("(nothing)")
                        : binary      ? drv::hex(bytes)
                                      : "\"" + drv::printable(bytes) + "\"";
    std::printf("%s %4zu B  %s\n", dir.c_str(), bytes.size(), shown.c_str());
  }
}

int run_probe(const tarn::cli::Args& args) {
  tarn::cli::Options o(args, {"config", "instrument"}, {"help", "verbose"});
  if (!o.ok() || o.has("help") || !o.has("config") || !o.has("instrument")) {
    std::fprintf(o.has("help") ? stdout : stderr,
                 "%s%susage: tarn probe --config FILE --instrument NAME [--verbose]\n"
                 "Polls one instrument once; prints the raw exchange and calibrated values.\n",
                 o.error().c_str(), o.error().empty() ? "" : "\n");
    return o.has("help") ? 0 : tarn::cli::ex_usage;
  }
  spdlog::set_level(o.has("verbose") ? spdlog::level::debug : spdlog::level::warn);
  const std::string file = o.get("config");
  auto res = tarn::daemon::load_and_check(file);
  if (!res.config) {
    std::fputs(res.problems.render(file).c_str(), stderr);
    return tarn::cli::ex_config;
  }
  const auto& cfg = *res.config;
  const auto* in = cfg.find_instrument(o.get("instrument"));
  if (!in) {
    std::string names;
    for (auto& i : cfg.instruments) names += (names.empty() ? "" : ", ") + i.name;
    std::fprintf(stderr, "tarn probe: %s has no instrument \"%s\"; instruments: %s\n", file.c_str(),
                 o.get("instrument").c_str(), names.c_str());
    return tarn::cli::ex_usage;
  }
  const auto* line = cfg.find_line(in->line);
  auto driver = drv::find_driver(in->driver)->create(*in, *line);
  boost::asio::io_context io;
  drv::SerialPort port(io, *line);
  if (std::string e = port.open(); !e.empty()) {
    std::fprintf(stderr, "tarn probe: line %s: %s\n", line->name.c_str(), e.c_str());
    return port.last_open_busy() ? tarn::cli::ex_tempfail : tarn::cli::ex_unavailable;
  }
  std::printf("instrument %s (%s) on line %s: %s, %d baud %d%c%d\n", in->name.c_str(),
              in->driver.c_str(), line->name.c_str(), port.device().c_str(), line->baud,
              line->data_bits, line->parity == "none" ? 'N' : char(std::toupper(line->parity[0])),
              line->stop_bits);
  drv::ExchangeLog id_log, log;
  std::string ident;
  drv::PollResult r;
  boost::asio::co_spawn(
      io,
      [&]() -> boost::asio::awaitable<void> {
        ident = co_await driver->identify(port, &id_log);
        r = co_await driver->poll(port, &log);
      },
      boost::asio::detached);
  io.run();
  if (!id_log.entries.empty()) {
    print_exchange(id_log, driver->binary());
    std::printf("identify  %s\n", ident.c_str());
  }
  print_exchange(log, driver->binary());
  bool all_ok = r.channels.size() == in->channels.size();
  for (std::size_t i = 0; i < r.channels.size() && i < in->channels.size(); ++i) {
    const auto& ch = in->channels[i];
    const auto& c = r.channels[i];
    all_ok &= c.problem == drv::ReadProblem::none && c.value.has_value();
    std::string v = "-";
    if (c.value) {
      char buf[48];
      std::snprintf(buf, sizeof buf, "%.6g", *c.value);
      v = buf;
    }
    std::printf("channel %-12s %12s %-6s %-16s calibration %s\n", ch.name.c_str(), v.c_str(),
                ch.unit.c_str(), drv::to_string(c.problem),
                drv::describe(drv::calibrations_of(*in)[i]).c_str());
  }
  if (!r.error.empty()) std::printf("error     %s\n", r.error.c_str());
  return all_ok ? tarn::cli::ex_ok : tarn::cli::ex_unavailable;
}

}  // namespace

TARN_COMMAND(probe, "poll one instrument once and show the raw exchange", run_probe);
