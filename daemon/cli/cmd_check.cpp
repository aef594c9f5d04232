// tarn check --config FILE: validate a station config; never opens a port.
#include <cstdio>

#include "daemon/cli/command.h"
#include "daemon/core/config_check.h"

namespace {

int run_check(const tarn::cli::Args& args) {
  tarn::cli::Options o(args, {"config"}, {"help", "quiet"});
  if (!o.ok() || o.has("help") || !o.has("config")) {
    std::fprintf(o.has("help") ? stdout : stderr,
                 "%s%susage: tarn check --config FILE [--quiet]\n"
                 "Validates the station config; prints a summary, or one line per problem.\n",
                 o.error().c_str(), o.error().empty() ? "" : "\n");
    return o.has("help") ? 0 : tarn::cli::ex_usage;
  }
  std::string file = o.get("config");
  auto res = tarn::daemon::load_and_check(file);
  if (!res.config) {
    std::fputs(res.problems.render(file).c_str(), stderr);
    std::fprintf(stderr, "%s: %zu problem%s; nothing was started\n", file.c_str(),
                 res.problems.size(), res.problems.size() == 1 ? "" : "s");
    return tarn::cli::ex_config;
  }
  if (o.has("quiet")) return 0;
  const auto& c = *res.config;
  std::printf("%s: valid\n", file.c_str());
  std::printf("station   %s%s%s at %.5f, %.5f\n", c.station.id.c_str(),
              c.station.name.empty() ? "" : " - ", c.station.name.c_str(), c.station.latitude,
              c.station.longitude);
  std::printf("sampling  every %d s, windows of %d s (%d samples per channel)\n",
              c.sampling.period_s, c.sampling.window_s, c.sampling.window_s / c.sampling.period_s);
  for (auto& l : c.lines) {
    std::string where = l.usb ? "usb " + l.usb->vendor_id + ":" + l.usb->product_id +
                                    (l.usb->serial.empty() ? "" : " #" + l.usb->serial)
                              : l.port;
    std::printf("line      %-14s %s, %d %d%c%d%s\n", l.name.c_str(), where.c_str(), l.baud,
                l.data_bits,
                l.parity == "none"   ? 'N'
                : l.parity == "even" ? 'E'
                                     : 'O',
                l.stop_bits, l.rs485_kernel_mode ? ", RS-485 kernel mode" : "");
  }
  std::size_t nch = 0;
  for (auto& in : c.instruments) {
    std::printf("instrument %-13s %s on %s, %zu channel%s\n", in.name.c_str(), in.driver.c_str(),
                in.line.c_str(), in.channels.size(), in.channels.size() == 1 ? "" : "s");
    for (auto& ch : in.channels) {
      std::printf("  channel %-16s %-18s %-8s resolution %g\n", ch.name.c_str(),
                  ch.quantity.c_str(), ch.unit.c_str(), ch.resolution);
      nch++;
    }
  }
  std::printf("uplink    %s\n", c.uplink.backend.c_str());
  std::printf("state     %s, runtime %s\n", c.paths.state_dir.c_str(), c.paths.runtime_dir.c_str());
  std::printf("%zu lines, %zu instruments, %zu channels\n", c.lines.size(), c.instruments.size(),
              nch);
  return 0;
}

}  // namespace

TARN_COMMAND(check, "validate a station config (never opens a port)", run_check);
