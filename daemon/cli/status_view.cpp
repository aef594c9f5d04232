#include "daemon/cli/status_view.h"

#include <cstdio>

#include "config/station_config.h"

namespace tarn::cli {

using nlohmann::json;

static std::string str(const json& j, const char* k, const std::string& d = "-") {
  if (!j.contains(k) || j[k].is_null()) return d;
  if (j[k].is_string()) return j[k].get<std::string>();
  return j[k].dump();
}

std::string render_status(const json& s) {
  std::string out;
  char buf[512];
  std::snprintf(buf, sizeof buf, "station %s  tarn %s  up %s s  at %s%s\n",
                str(s, "station").c_str(), str(s, "version").c_str(), str(s, "uptime_s").c_str(),
                str(s, "now").c_str(),
                s.value("speed", 1.0) != 1.0 ? ("  (speed x" + str(s, "speed") + ")").c_str() : "");
  out += buf;
  out += "\ninstruments\n";
  for (auto& i : s.value("instruments", json::array())) {
    std::snprintf(buf, sizeof buf, "  %-14s %-8s %-14s polls %-6s errors %-5s %s\n",
                  str(i, "name").c_str(), str(i, "line").c_str(), str(i, "state").c_str(),
                  str(i, "polls").c_str(), str(i, "errors").c_str(),
                  str(i, "last_error", "").c_str());
    out += buf;
  }
  out +=
      "\nchannels (last sample and flag; current window: pass/not "
      "evaluated/suspect/fail/missing)\n";
  for (auto& c : s.value("channels", json::array())) {
    std::string v = c.contains("value") && c["value"].is_number()
                        ? std::to_string(c["value"].get<double>())
                        : std::string("-");
    auto w = c.value("window", json::object());
    std::snprintf(buf, sizeof buf, "  %-16s %12s %-6s flag %-2s  window %s/%s/%s/%s/%s\n",
                  str(c, "name").c_str(), v.c_str(), str(c, "unit").c_str(), str(c, "flag").c_str(),
                  str(w, "pass").c_str(), str(w, "not_evaluated").c_str(),
                  str(w, "suspect").c_str(), str(w, "fail").c_str(), str(w, "missing").c_str());
    out += buf;
  }
  auto win = s.value("window", json::object());
  std::snprintf(buf, sizeof buf, "\nwindow  %s (%s s), %s closed since start\n",
                str(win, "start").c_str(), str(win, "length_s").c_str(),
                str(win, "closed_total").c_str());
  out += buf;
  auto l = s.value("link", json::object());
  std::snprintf(
      buf, sizeof buf, "link    %s %s, queued %s, acknowledged %s, dropped %s%s\n",
      str(l, "backend").c_str(), str(l, "state").c_str(), str(l, "queued").c_str(),
      str(l, "acknowledged").c_str(), str(l, "dropped").c_str(),
      str(l, "last_error", "").empty() ? "" : (", last error: " + str(l, "last_error")).c_str());
  out += buf;
  return out;
}

std::string socket_path(const Options& o) {
  if (o.has("socket")) return o.get("socket");
  if (o.has("config")) {
    auto res = config::load_file(o.get("config"));
    if (!res.config || !res.problems.empty()) {
      std::fputs(res.problems.render(o.get("config")).c_str(), stderr);
      return {};
    }
    return res.config->paths.runtime_dir + "/control.sock";
  }
  return "/run/tarn/control.sock";
}

}  // namespace tarn::cli
