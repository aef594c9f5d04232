#include "daemon/cli/status_view.h"

#include <algorithm>
#include <cstdio>

#include "config/station_config.h"

namespace tarn::cli {

using nlohmann::json;

static std::string str(const json& j, const char* k, const std::string& d = "-") {
  if (!j.contains(k) || j[k].is_null()) return d;
  if (j[k].is_string()) return j[k].get<std::string>();
  return j[k].dump();
}

// The store's drop counters ("dropped.unsent_normal": 462, ...): "none", the
// total, or each by kind without the "dropped." prefix.
static std::string drop_text(const json& store, bool detail) {
  std::string text;
  std::int64_t total = 0;
  const json drops = store.value("drops", json::object());
  for (auto& [k, v] : drops.items()) {
    if (!v.is_number_integer() || v.get<std::int64_t>() == 0) continue;
    total += v.get<std::int64_t>();
    std::string name = k.rfind("dropped.", 0) == 0 ? k.substr(8) : k;
    text += (text.empty() ? "" : ", ") + name + " " + v.dump();
  }
  if (total == 0) return "none";
  return detail ? text : std::to_string(total);
}

// Maintenance in words: "fluorometer until 10:42Z" per open period, and the
// last one that ended ("last: fluorometer ended by itself at ...").
static std::string hhmm(const std::string& iso) {
  return iso.size() == 20 ? iso.substr(11, 5) + "Z" : iso;
}
static std::string scope_of(const json& p) {
  return p.contains("instrument") && p["instrument"].is_string()
             ? p["instrument"].get<std::string>()
             : std::string("whole station");
}
static std::string maintenance_open_text(const json& s) {
  std::string text;
  for (auto& p : s.value("maintenance_periods", json::array()))
    text += (text.empty() ? "" : ", ") + scope_of(p) + " until " + hhmm(str(p, "until"));
  return text;
}
static std::string maintenance_last_text(const json& s, bool short_time) {
  if (!s.contains("maintenance_last") || !s["maintenance_last"].is_object()) return {};
  const json& l = s["maintenance_last"];
  std::string by = str(l, "ended_by", "");
  std::string how = by == "time_limit" ? " ended by itself at "
                    : by == "config"   ? " ended (instrument removed from the config) at "
                                       : " ended at ";
  std::string when = str(l, "ended");
  return "last: " + scope_of(l) + how + (short_time ? hhmm(when) : when);
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
  for (auto& a : s.value("alerts", json::array())) {
    std::snprintf(buf, sizeof buf, "alert   %s: %s\n", str(a, "rule").c_str(),
                  str(a, "level").c_str());
    out += buf;
    if (a.contains("stale") && a["stale"].is_string()) {
      out.pop_back();
      out += " (STALE: " + a["stale"].get<std::string>() + ", unconfirmed)\n";
    }
  }
  if (s.value("maintenance", false))
    out += "maintenance: " + maintenance_open_text(s) + " (ACTIVE: its samples are flagged fail)\n";
  if (auto last = maintenance_last_text(s, false); !last.empty())
    out += "maintenance " + last + "\n";
  auto st = s.value("store", json::object());
  std::snprintf(buf, sizeof buf, "outbox  %s unsent (oldest %s), %s sent kept; store %s\n",
                str(st, "unsent").c_str(), str(st, "oldest_unsent").c_str(),
                str(st, "sent_kept").c_str(), str(st, "condition").c_str());
  out += buf;
  out += "drops   " + drop_text(st, /*detail=*/true) + "\n";
  auto l = s.value("link", json::object());
  std::string last_error = str(l, "last_error", "");
  std::snprintf(buf, sizeof buf, "link    %s %s, in flight %s, acknowledged %s, last ack %s%s\n",
                str(l, "backend").c_str(), str(l, "state").c_str(), str(l, "in_flight").c_str(),
                str(l, "acknowledged").c_str(), str(l, "last_ack").c_str(),
                last_error.empty() ? "" : (", last error: " + last_error).c_str());
  out += buf;
  return out;
}

// Eight-level bar characters (U+2581..U+2588) for a sparkline of hourly means.
static std::string sparkline(const json& values) {
  static const char* bars[] = {"\u2581", "\u2582", "\u2583", "\u2584",
                               "\u2585", "\u2586", "\u2587", "\u2588"};
  double lo = 1e300, hi = -1e300;
  for (auto& v : values)
    if (v.is_number()) {
      lo = std::min(lo, v.get<double>());
      hi = std::max(hi, v.get<double>());
    }
  std::string out;
  for (auto& v : values) {
    if (!v.is_number()) {
      out += " ";
      continue;
    }
    int i = hi > lo ? int((v.get<double>() - lo) / (hi - lo) * 7.999) : 3;
    out += bars[std::clamp(i, 0, 7)];
  }
  return out;
}

std::string render_screen(const json& s, bool colour) {
  // A compact view for an 80x24 SSH session. Colour only marks trouble.
  auto red = [&](const std::string& t) { return colour ? "\x1b[31m" + t + "\x1b[0m" : t; };
  auto bold = [&](const std::string& t) { return colour ? "\x1b[1m" + t + "\x1b[0m" : t; };
  std::string out;
  char buf[256];
  auto h = s.value("health", json::object());
  std::snprintf(buf, sizeof buf, "%s  %s  up %ss  clock %s\n", bold(str(s, "station")).c_str(),
                str(s, "now").c_str(), str(s, "uptime_s").c_str(), str(h, "clock").c_str());
  out += buf;
  out += "INSTRUMENT     LINE     STATE          POLLS  ERRORS  LAST ERROR\n";
  for (auto& i : s.value("instruments", json::array())) {
    std::string state = str(i, "state");
    std::snprintf(buf, sizeof buf, "%-14.14s %-8.8s %-14s %6s %7s  %.28s\n", str(i, "name").c_str(),
                  str(i, "line").c_str(), state.c_str(), str(i, "polls").c_str(),
                  str(i, "errors").c_str(), str(i, "last_error", "").c_str());
    out += state == "online" ? std::string(buf) : red(buf);
  }
  out += "CHANNEL        VALUE      UNIT  FLAG  WINDOW 1/2/3/4/9    LAST 6 HOURS\n";
  auto spark = s.value("sparklines", json::object());
  for (auto& c : s.value("channels", json::array())) {
    std::string v =
        c.contains("value") && c["value"].is_number()
            ? (std::snprintf(buf, sizeof buf, "%.3f", c["value"].get<double>()), std::string(buf))
            : std::string("-");
    auto w = c.value("window", json::object());
    std::string counts = str(w, "pass") + "/" + str(w, "not_evaluated") + "/" + str(w, "suspect") +
                         "/" + str(w, "fail") + "/" + str(w, "missing");
    std::string name = str(c, "name");
    std::snprintf(buf, sizeof buf, "%-14.14s %-10s %-5s %-5s %-19s %s\n", name.c_str(), v.c_str(),
                  str(c, "unit").c_str(), str(c, "flag").c_str(), counts.c_str(),
                  spark.contains(name) ? sparkline(spark[name]).c_str() : "");
    int flag = c.value("flag", 2);
    out += flag == 3 || flag == 4 || flag == 9 ? red(buf) : std::string(buf);
  }
  std::string alerts;
  for (auto& a : s.value("alerts", json::array()))
    alerts += (alerts.empty() ? "" : ", ") + str(a, "rule") + " " + str(a, "level") +
              (a.contains("stale") && a["stale"].is_string() ? " (stale)" : "");
  out += "ALERT LEVEL    " + (alerts.empty() ? std::string("no rules") : alerts) + "\n";
  // One line at most, only when there is something to say (the frame fits 24 rows).
  std::string maint =
      s.value("maintenance", false) ? maintenance_open_text(s) : maintenance_last_text(s, true);
  if (!maint.empty()) {
    std::string line = "MAINTENANCE    " + maint;
    if (line.size() > 79) line = line.substr(0, 76) + "...";
    out += s.value("maintenance", false) ? red(line) + "\n" : line + "\n";
  }
  auto st = s.value("store", json::object());
  // The total only: the line must stay within 80 columns (`tarn status`
  // without --watch lists them by kind).
  std::snprintf(buf, sizeof buf, "OUTBOX         %s unsent, oldest %s, drops %s\n",
                str(st, "unsent").c_str(), str(st, "oldest_unsent").c_str(),
                drop_text(st, /*detail=*/false).c_str());
  out += buf;
  auto l = s.value("link", json::object());
  auto pol = l.value("policy", json::object());
  // Two lines, each within 80 columns: the link and its last ack, then the
  // day's usage against the budget and the next planned connection.
  std::string last_ack = str(l, "last_ack");
  if (last_ack.size() == 20) last_ack = last_ack.substr(5, 11);  // MM-DDThh:mm of an ISO time
  std::snprintf(buf, sizeof buf, "LINK           %s %s, last ack %s\n", str(l, "backend").c_str(),
                str(l, "state").c_str(), last_ack.c_str());
  out += str(l, "state") == "up" ? std::string(buf) : red(buf);
  std::string budget = pol.contains("daily_budget_bytes") &&
                               pol["daily_budget_bytes"].is_number() &&
                               pol["daily_budget_bytes"].get<double>() > 0
                           ? "of " + str(pol, "daily_budget_bytes") + " B"
                           : "(no budget)";
  std::string next = str(pol, "next_connection", "-");
  if (next.empty()) next = "-";  // always connected: no planned connection
  if (next.size() == 20) next = next.substr(5, 11);
  std::snprintf(buf, sizeof buf, "  usage        %s B today %s, next connection %s\n",
                str(pol, "usage_today_bytes", "0").c_str(), budget.c_str(), next.c_str());
  out += buf;
  std::snprintf(buf, sizeof buf, "DISK           %s of %s MiB free, store %s/%s MiB %s\n",
                str(h, "disk_free_mib").c_str(), str(h, "disk_total_mib").c_str(),
                str(st, "used_mib").c_str(), str(st, "budget_mib").c_str(),
                str(st, "condition").c_str());
  out += str(st, "condition").rfind("ok", 0) == 0 ? std::string(buf) : red(buf);
  std::snprintf(buf, sizeof buf, "BOARD          %s Cel, load %s, supply %s V, boot #%s\n",
                str(h, "board_temp_c").c_str(), str(h, "load1").c_str(), str(h, "supply_v").c_str(),
                str(h, "boot_count").c_str());
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
