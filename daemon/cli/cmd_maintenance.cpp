// tarn maintenance start|stop [--note TEXT]: marks a maintenance period (the
// optics being cleaned, an instrument swapped). While it is active, samples
// are flagged fail with the maintenance reason, and the period is recorded.
#include <cstdio>

#include "daemon/cli/command.h"
#include "daemon/cli/status_view.h"
#include "daemon/control/control_server.h"

namespace {

int run_maintenance(const tarn::cli::Args& args) {
  tarn::cli::Options o(args, {"config", "socket", "note"}, {"help"});
  bool ok = o.ok() && o.positional().size() == 1 &&
            (o.positional()[0] == "start" || o.positional()[0] == "stop");
  if (!ok || o.has("help")) {
    std::fprintf(
        o.has("help") ? stdout : stderr,
        "%s%susage: tarn maintenance start|stop [--note TEXT] [--config FILE | --socket PATH]\n"
        "While maintenance is active, samples are flagged fail (QARTOD 4, reason maintenance).\n",
        o.error().c_str(), o.error().empty() ? "" : "\n");
    return o.has("help") ? 0 : tarn::cli::ex_usage;
  }
  std::string sock = tarn::cli::socket_path(o);
  if (sock.empty()) return tarn::cli::ex_config;
  std::string err;
  auto reply = tarn::control::request(
      sock, {{"command", "maintenance"}, {"action", o.positional()[0]}, {"note", o.get("note")}},
      err);
  if (!err.empty()) {
    std::fprintf(stderr, "tarn maintenance: %s\n", err.c_str());
    return tarn::cli::ex_unavailable;
  }
  if (!reply.value("ok", false)) {
    std::fprintf(stderr, "tarn maintenance: %s\n",
                 reply.value("error", std::string("refused")).c_str());
    return tarn::cli::ex_dataerr;
  }
  std::printf("maintenance %s\n", o.positional()[0] == "start" ? "started" : "ended");
  return 0;
}

}  // namespace

TARN_COMMAND(maintenance, "start or stop a maintenance period", run_maintenance);
