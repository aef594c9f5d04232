// tarn maintenance start|stop [--instrument NAME] [--note TEXT] [--max-minutes N]:
// marks a maintenance period (the optics being cleaned, an instrument
// swapped) of the whole station or of one instrument. While it is active,
// that scope's samples are flagged fail with the maintenance reason, and the
// period is recorded. A period ends by itself after its maximum duration
// (config `maintenance.max_duration_s`, or --max-minutes).
// Exit codes (sysexits): 64 bad usage (also a --max-minutes out of range),
// 65 refused by the daemon (unknown instrument, already active, nothing to
// stop), 69 daemon not reachable.
#include <cstdio>
#include <cstdlib>

#include "config/downlink_command.h"
#include "daemon/cli/command.h"
#include "daemon/cli/status_view.h"
#include "daemon/control/control_server.h"

namespace {

// "2026-06-01T10:42:00Z" -> "10:42Z" (the date when it is not today's is
// in `tarn status`).
std::string short_time(const std::string& iso) {
  return iso.size() == 20 ? iso.substr(11, 5) + "Z" : iso;
}

int run_maintenance(const tarn::cli::Args& args) {
  tarn::cli::Options o(args, {"config", "socket", "note", "instrument", "max-minutes"}, {"help"});
  bool ok = o.ok() && o.positional().size() == 1 &&
            (o.positional()[0] == "start" || o.positional()[0] == "stop");
  if (!ok || o.has("help")) {
    std::fprintf(o.has("help") ? stdout : stderr,
                 "%s%susage: tarn maintenance start|stop [--instrument NAME] [--note TEXT] "
                 "[--max-minutes N] [--config FILE | --socket PATH]\n"
                 "While maintenance is active, the samples of the instrument (without "
                 "--instrument: of every instrument)\nare flagged fail (QARTOD 4, reason "
                 "maintenance). A period ends by itself after --max-minutes\n(start only) or "
                 "the config's maintenance.max_duration_s. stop without --instrument ends every "
                 "period.\n",
                 o.error().c_str(), o.error().empty() ? "" : "\n");
    return o.has("help") ? 0 : tarn::cli::ex_usage;
  }
  const bool start = o.positional()[0] == "start";
  tarn::control::Json req = {
      {"command", "maintenance"}, {"action", o.positional()[0]}, {"note", o.get("note")}};
  if (o.has("instrument")) req["instrument"] = o.get("instrument");
  if (o.has("max-minutes")) {
    const std::string text = o.get("max-minutes");
    char* end = nullptr;
    long long n = std::strtoll(text.c_str(), &end, 10);
    if (!start || text.empty() || *end || n < tarn::config::kMaintenanceMaxMinutesMin ||
        n > tarn::config::kMaintenanceMaxMinutesMax) {
      std::fprintf(stderr,
                   "tarn maintenance: --max-minutes %s is not allowed; allowed: with start only, "
                   "an integer %lld to %lld\n",
                   text.c_str(), (long long)tarn::config::kMaintenanceMaxMinutesMin,
                   (long long)tarn::config::kMaintenanceMaxMinutesMax);
      return tarn::cli::ex_usage;
    }
    req["max_minutes"] = n;
  }
  std::string sock = tarn::cli::socket_path(o);
  if (sock.empty()) return tarn::cli::ex_config;
  std::string err;
  auto reply = tarn::control::request(sock, req, err);
  if (!err.empty()) {
    std::fprintf(stderr, "tarn maintenance: %s\n", err.c_str());
    return tarn::cli::ex_unavailable;
  }
  if (!reply.value("ok", false)) {
    std::fprintf(stderr, "tarn maintenance: %s\n",
                 reply.value("error", std::string("refused")).c_str());
    return tarn::cli::ex_dataerr;
  }
  if (start) {
    auto s = reply.value("started", tarn::control::Json::object());
    std::string who = o.has("instrument") ? " of " + o.get("instrument") : "";
    std::printf("maintenance%s started, ends by itself at %s\n", who.c_str(),
                short_time(s.value("until", std::string("?"))).c_str());
  } else {
    std::string list;
    for (auto& e : reply.value("ended", tarn::control::Json::array()))
      list += (list.empty() ? "" : ", ") +
              (e.is_string() ? e.get<std::string>() : std::string("the whole station"));
    std::printf("maintenance ended: %s\n", list.c_str());
  }
  return 0;
}

}  // namespace

TARN_COMMAND(maintenance, "start or stop a maintenance period", run_maintenance);
