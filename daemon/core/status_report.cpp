#include "daemon/core/status_report.h"

#include <cmath>

#include "daemon/core/bus_lines.h"
#include "daemon/core/clock_watch.h"
#include "daemon/core/health_reporter.h"
#include "daemon/core/link_control.h"
#include "daemon/core/maintenance_control.h"
#include "daemon/core/outbox_drain.h"
#include "daemon/core/packet_queue.h"
#include "daemon/core/shore_commands.h"
#include "drivers/os/utc_text.h"

namespace tarn::daemon {

Json StatusReport::instruments() const {
  Json ins = Json::array();
  for (auto& l : p_.lines.lines()) {
    if (!l) continue;
    for (auto& st : l->status()) {
      Json i;
      i["name"] = st.name;
      i["line"] = l->line().name;
      i["state"] = drivers::to_string(st.state);
      i["polls"] = st.polls;
      i["errors"] = st.errors;
      i["last_error"] = st.last_error;
      if (st.last_ok_ms) i["last_ok"] = os::format_utc(st.last_ok_ms / 1000);
      ins.push_back(i);
    }
  }
  return ins;
}

Json StatusReport::channels() const {
  const auto& ctx = p_.ctx;
  const WindowAssembler* assembler = ctx.assembler.get();
  Json chans = Json::array();
  for (std::size_t i = 0; assembler && i < assembler->channel_count(); ++i) {
    const ChannelView& v = assembler->view(i);
    Json c;
    c["name"] = ctx.channel_names[i];
    c["instrument"] = ctx.channel_instruments[i];
    c["unit"] = ctx.channel_units[i];
    c["maintenance"] = assembler->channel_in_maintenance(i);
    c["value"] = v.last && v.last->value ? Json(*v.last->value) : Json(nullptr);
    c["flag"] = v.last ? int(v.last->flag) : 2;
    c["reasons"] = v.last ? v.last->reasons : 0;
    if (v.last) c["t"] = os::format_utc(v.last->t);
    c["window"] = {{"pass", v.window_counts[0]},
                   {"not_evaluated", v.window_counts[1]},
                   {"suspect", v.window_counts[2]},
                   {"fail", v.window_counts[3]},
                   {"missing", v.window_counts[4]}};
    chans.push_back(c);
  }
  return chans;
}

Json StatusReport::alerts() const {
  Json alerts = Json::array();
  const WindowAssembler* assembler = p_.ctx.assembler.get();
  if (!assembler) return alerts;
  auto causes = assembler->alert_stale_causes();
  std::size_t i = 0;
  // stale: why the standing level cannot be confirmed (null while it can).
  for (auto& [rule, level] : assembler->alert_levels()) {
    const std::string& cause = causes[i++];
    alerts.push_back({{"rule", rule},
                      {"level", level.empty() ? "none" : level},
                      {"stale", cause.empty() ? Json(nullptr) : Json(cause)}});
  }
  return alerts;
}

void StatusReport::add_maintenance(Json& s) const {
  // Maintenance: true while any period is open (the whole station's or an
  // instrument's); the periods and the last one that ended.
  const MaintenanceBook& book = p_.maintenance.book();
  s["maintenance"] = book.any();
  Json periods = Json::array();
  for (auto& [scope, e] : book.open())
    periods.push_back({{"instrument", scope.empty() ? Json(nullptr) : Json(scope)},
                       {"since", os::format_utc(e.start_t)},
                       {"until", os::format_utc(e.until_t)},
                       {"note", e.note}});
  s["maintenance_periods"] = periods;
  if (auto& l = book.last_ended(); l && l->end_t)
    s["maintenance_last"] = {
        {"instrument", l->instrument.empty() ? Json(nullptr) : Json(l->instrument)},
        {"since", os::format_utc(l->start_t)},
        {"ended", os::format_utc(*l->end_t)},
        {"ended_by", l->ended_by},
        {"note", l->note}};
}

Json StatusReport::store() const {
  Json st;
  if (!p_.ctx.store) return st;
  // The store's queries are not const (they run statements on its files):
  // reached through the context's pointer, they change nothing.
  store::StationStore& store = *p_.ctx.store;
  auto c = store.outbox().counts();
  if (c.ok()) {
    st["unsent"] = c.value().unsent;
    st["sent_kept"] = c.value().sent_kept;
    if (c.value().oldest_unsent_created_t)
      st["oldest_unsent"] = os::format_utc(*c.value().oldest_unsent_created_t);
  }
  st["condition"] = store.condition();
  if (auto used = store.used_bytes(); used.ok())
    st["used_mib"] = std::round(double(used.value()) / (1 << 20) * 10) / 10;
  st["budget_mib"] = store.options().limits.budget_bytes >> 20;
  // Both files count their own drops (packets in the outbox, samples in the
  // archive): the view shows them all.
  Json drops = Json::object();
  for (auto counters : {store.outbox().counters(), store.archive().counters()})
    for (auto& [k, v] : counters)
      if (k.rfind("drop", 0) == 0) drops[k] = drops.value(k, std::int64_t(0)) + v;
  st["drops"] = drops;
  return st;
}

Json StatusReport::link() const {
  const auto& ctx = p_.ctx;
  const auto& drain = p_.drain;
  const auto& link = p_.link;
  const uplink::UplinkBackend* up = ctx.uplink.get();
  Json l = {{"backend", ctx.cfg.uplink.backend},
            {"state", ctx.link_state()},
            {"last_error", up ? up->last_error() : ""},
            {"in_flight", drain.inflight().size()},
            {"acknowledged", drain.packets_acked()},
            {"last_ack", drain.last_ack_t() ? os::format_utc(drain.last_ack_t()) : ""},
            {"bytes_sent", up ? up->bytes_sent() : 0}};
  auto next = link.next_due();
  Json pol = {{"mode", link.policy().scheduled ? "scheduled" : "always"},
              {"open", link.is_open()},
              {"next_connection", next ? os::format_utc(*next) : ""},
              {"usage_today_bytes", drain.usage().bytes},
              {"daily_budget_bytes", link.policy().daily_budget_bytes},
              {"budget_left", drain.budget_left()},
              {"resend_queued", drain.resend_queued()}};
  const auto& runner = link.runner();
  if (runner.last().started || !runner.last().error.empty())
    pol["last_link_command"] = runner.last().describe();
  l["policy"] = pol;
  return l;
}

Json StatusReport::status() const {
  const auto& ctx = p_.ctx;
  Json s;
  std::int64_t now = ctx.clock.wall_ms();
  s["ok"] = true;
  s["station"] = ctx.cfg.station.id;
  s["version"] = TARN_VERSION;
  s["now"] = os::format_utc(now / 1000);
  s["uptime_s"] = (now - ctx.started_ms) / 1000;
  s["speed"] = ctx.clock.speed();
  s["instruments"] = instruments();
  s["channels"] = channels();
  std::int64_t w = std::int64_t(ctx.cfg.sampling.window_s) * 1000;
  s["window"] = {{"start", os::format_utc(now / w * w / 1000)},
                 {"length_s", ctx.cfg.sampling.window_s},
                 {"closed_total", p_.packets.windows_closed()}};
  s["alerts"] = alerts();
  add_maintenance(s);
  s["store"] = store();
  const auto& clock = p_.clock_watch;
  s["health"] = p_.health.reading().to_json();
  s["health"]["clock"] = to_string(clock.sync());
  s["clock"] = {{"sync", to_string(clock.sync())},
                {"steps", clock.steps()},
                {"last_step", clock.last_step()}};
  s["sparklines"] = p_.health.sparklines();
  s["link"] = link();
  const uplink::DownlinkReceiver* rx = p_.shore.receiver();
  s["downlink"] = {{"signed_only", rx && rx->signed_only()},
                   {"accepted", rx ? rx->accepted() : 0},
                   {"refused", rx ? rx->refused() : 0}};
  s["settings"] = {{"period_s", ctx.cfg.sampling.period_s},
                   {"window_s", ctx.cfg.sampling.window_s},
                   {"overrides", p_.shore.overrides()}};
  return s;
}

std::string StatusReport::line() const {
  std::size_t online = 0, total = 0;
  for (auto& l : p_.lines.lines())
    if (l)
      for (auto& st : l->status()) {
        total++;
        online += st.state == drivers::InstrumentState::online;
      }
  std::string unsent = "?";
  if (p_.ctx.store) {
    auto c = p_.ctx.store->outbox().counts();
    if (c.ok()) unsent = std::to_string(c.value().unsent);
  }
  return std::to_string(online) + "/" + std::to_string(total) + " instruments online, link " +
         p_.ctx.link_state() + ", " + unsent + " unsent";
}

}  // namespace tarn::daemon
