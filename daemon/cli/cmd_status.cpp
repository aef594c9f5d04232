// tarn status [--json] [--config FILE | --socket PATH]: the daemon's state.
#include <cstdio>

#include "daemon/cli/command.h"
#include "daemon/cli/status_view.h"
#include "daemon/control/control_server.h"
#include "daemon/core/config_check.h"

namespace {

int run_status(const tarn::cli::Args& args) {
  tarn::cli::Options o(args, {"config", "socket"}, {"json", "help"});
  if (!o.ok() || o.has("help")) {
    std::fprintf(o.has("help") ? stdout : stderr,
                 "%s%susage: tarn status [--json] [--config FILE | --socket PATH]\n",
                 o.error().c_str(), o.error().empty() ? "" : "\n");
    return o.has("help") ? 0 : tarn::cli::ex_usage;
  }
  std::string sock = tarn::cli::socket_path(o);
  if (sock.empty()) return tarn::cli::ex_config;
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
