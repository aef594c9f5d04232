#include "daemon/core/maintenance_control.h"

#include <cstdint>
#include <set>

#include "drivers/os/logging.h"
#include "drivers/os/utc_text.h"

namespace tarn::daemon {

void MaintenanceControl::read_options() {
  opts_ = ctx_.cfg.settings.get<MaintenanceOptions>();
}

std::string MaintenanceControl::request(const config::MaintenanceArgs& a, const std::string& via,
                                        Json& data) {
  if (auto why = book_.check(a, ctx_.instrument_names()); !why.empty()) return why;
  std::int64_t t = ctx_.now_s();
  auto log = os::logger("station");
  if (a.start) {
    std::int64_t max_s = a.max_minutes ? *a.max_minutes * 60 : opts_.max_duration_s;
    MaintenanceEntry& e = book_.start(a, t, max_s);
    store::MaintenancePeriod row;
    row.start_t = e.start_t;
    row.note = e.note;
    row.instrument = e.instrument;
    row.until_t = e.until_t;
    if (auto id = ctx_.store->archive().add_maintenance(row); id.ok()) e.archive_id = id.value();
    log->info("maintenance of {} started ({}){}; it ends by itself at {}",
              maintenance_scope_name(e.instrument), via, e.note.empty() ? "" : ": " + e.note,
              os::format_utc(e.until_t));
    data["started"] = {{"instrument", e.instrument},
                       {"since", os::format_utc(e.start_t)},
                       {"until", os::format_utc(e.until_t)}};
  } else {
    auto ended = book_.stop(a.instrument, t);
    record_ended(ended);
    Json list = Json::array();
    for (auto& e : ended) {
      log->info("maintenance of {} ended ({})", maintenance_scope_name(e.instrument), via);
      list.push_back(e.instrument);
    }
    data["ended"] = list;
  }
  apply();
  return {};
}

void MaintenanceControl::record_ended(const std::vector<MaintenanceEntry>& ended) {
  if (ended.empty() || !ctx_.store) return;
  auto& archive = ctx_.store->archive();
  for (auto& e : ended) {
    if (e.archive_id) {
      archive.end_maintenance(*e.archive_id, *e.end_t, e.ended_by);
      continue;
    }
    // Its row was not written (a store fault), or is unknown: close the open
    // rows of its scope.
    if (auto open = archive.maintenance_between(INT64_MIN, INT64_MAX); open.ok())
      for (auto& m : open.value())
        if (!m.end_t && m.instrument == e.instrument)
          archive.end_maintenance(m.id, *e.end_t, e.ended_by);
  }
}

// The pipeline follows the book: channels of the covered instruments in
// maintenance, the others not; then the state is saved, and the timer set
// for the next period to end by itself.
void MaintenanceControl::apply() {
  if (!ctx_.assembler) return;
  std::set<std::string> scopes;
  for (auto& [scope, e] : book_.open()) scopes.insert(scope);
  ctx_.assembler->set_maintenance(ctx_.now_s(), scopes);
  ctx_.save_state();
  schedule_end();
}

void MaintenanceControl::schedule_end() {
  timer_.cancel();
  auto next = book_.next_until();
  if (!next || ctx_.stopping) return;
  std::weak_ptr<bool> alive = ctx_.alive;
  // Station time (respects --speed); a clock step is caught by the tick too.
  timer_ = ctx_.clock.start_timer(*next * 1000 - ctx_.clock.wall_ms(), [this, alive] {
    if (alive.lock() && !ctx_.stopping) expire();
  });
}

void MaintenanceControl::expire() {
  auto ended = book_.expire(ctx_.now_s(), /*at_until=*/false);
  if (ended.empty()) return;
  record_ended(ended);
  for (auto& e : ended)
    os::logger("station")->warn(
        "maintenance of {} ended by itself after {} min (its maximum duration){}",
        maintenance_scope_name(e.instrument), (*e.end_t - e.start_t + 30) / 60,
        e.note.empty() ? "" : "; note: " + e.note);
  apply();
}

void MaintenanceControl::restore() {
  // The open rows of the archive are the open periods (a restart). Rows of
  // an older tarn have no instrument (the whole station) and no end of
  // their own: the config's maximum applies from their start.
  book_.clear();
  auto& archive = ctx_.store->archive();
  if (auto open = archive.maintenance_between(INT64_MIN, INT64_MAX); open.ok()) {
    for (auto& m : open.value()) {
      if (m.end_t) continue;
      if (book_.open().count(m.instrument)) {  // a duplicate: closed at its own start
        archive.end_maintenance(m.id, m.start_t, "stop");
        continue;
      }
      MaintenanceEntry e;
      e.instrument = m.instrument;
      e.start_t = m.start_t;
      e.until_t = m.until_t ? *m.until_t : m.start_t + opts_.max_duration_s;
      e.note = m.note;
      e.archive_id = m.id;
      book_.restore(std::move(e));
    }
  }
  if (auto last = archive.last_ended_maintenance(INT64_MAX); last.ok() && last.value()) {
    MaintenanceEntry e;
    e.instrument = last.value()->instrument;
    e.start_t = last.value()->start_t;
    e.end_t = last.value()->end_t;
    e.ended_by = last.value()->ended_by;
    e.note = last.value()->note;
    book_.set_last_ended(std::move(e));
  }
  std::int64_t now = ctx_.now_s();
  auto gone = book_.drop_unknown(ctx_.instrument_names(), now);
  record_ended(gone);
  for (auto& e : gone)
    os::logger("station")->warn("maintenance of {} ended: the instrument is no longer configured",
                                maintenance_scope_name(e.instrument));
  auto ended = book_.expire(now, /*at_until=*/true);
  record_ended(ended);
  for (auto& e : ended)
    os::logger("station")->warn(
        "maintenance of {} ended by itself at {} (its maximum duration ran out while tarn was "
        "not running)",
        maintenance_scope_name(e.instrument), os::format_utc(*e.end_t));
  for (auto& [scope, e] : book_.open())
    os::logger("station")->info("maintenance of {} still active since {}, ends by itself at {}",
                                maintenance_scope_name(scope), os::format_utc(e.start_t),
                                os::format_utc(e.until_t));
  apply();
}

void MaintenanceControl::reload() {
  // Open periods keep the end they got at their start; a new maximum
  // applies to the next ones. An instrument the config dropped ends its.
  read_options();
  auto gone = book_.drop_unknown(ctx_.instrument_names(), ctx_.now_s());
  record_ended(gone);
  for (auto& e : gone)
    os::logger("station")->warn("maintenance of {} ended: the instrument is no longer configured",
                                maintenance_scope_name(e.instrument));
  apply();
}

}  // namespace tarn::daemon
