// tarn status [--json] [--config FILE | --socket PATH]: the daemon's state.
#include <unistd.h>

#include <algorithm>
#include <cstdio>
#include <cstdlib>

#include "daemon/cli/command.h"
#include "daemon/cli/status_view.h"
#include "daemon/control/control_server.h"
#include "daemon/core/config_check.h"

namespace {

int watch(const std::string& sock, const std::string& interval) {
  int every = std::max(1, std::atoi(interval.c_str()));
  bool tty = ::isatty(STDOUT_FILENO);
  for (;;) {
    std::string err;
    auto reply = tarn::control::request(sock, {{"command", "status"}}, err);
    std::string screen = err.empty() ? tarn::cli::render_screen(reply, tty)
                                     : "tarn status: " + err + " (retrying)\n";
    if (tty)
      std::printf("\x1b[H\x1b[2J%s", screen.c_str());  // home, clear: plain ANSI
    else
      std::printf("%s\n", screen.c_str());
    std::fflush(stdout);
    ::sleep(unsigned(every));
  }
}

int run_status(const tarn::cli::Args& args) {
  tarn::cli::Options o(args, {"config", "socket", "interval"}, {"json", "watch", "help"});
  if (!o.ok() || o.has("help")) {
    std::fprintf(
        o.has("help") ? stdout : stderr,
        "%s%susage: tarn status [--json | --watch [--interval S]] [--config FILE | --socket PATH]\n"
        "--watch redraws a live view every S seconds (default 2) until Ctrl-C;\n"
        "on a non-terminal it prints the view again each time, as plain text.\n",
        o.error().c_str(), o.error().empty() ? "" : "\n");
    return o.has("help") ? 0 : tarn::cli::ex_usage;
  }
  std::string sock = tarn::cli::socket_path(o);
  if (sock.empty()) return tarn::cli::ex_config;
  if (o.has("watch")) return watch(sock, o.get("interval", "2"));
  std::string err;
  auto reply = tarn::control::request(sock, {{"command", "status"}}, err);
  if (!err.empty()) {
    std::fprintf(stderr, "tarn status: %s\n", err.c_str());
    return tarn::cli::ex_unavailable;
  }
  if (o.has("json")) {
    std::printf("%s\n", reply.dump(2).c_str());
    return 0;
  }
  std::fputs(tarn::cli::render_status(reply).c_str(), stdout);
  return 0;
}

}  // namespace

TARN_COMMAND(status, "show the running daemon's state", run_status);
